package server

import (
	"math"
	"time"

	"google.golang.org/protobuf/proto"
	"google.golang.org/protobuf/types/known/timestamppb"

	"github.com/nightloom/nightloom/constraints"
	"github.com/nightloom/nightloom/internal/store"
	nightloomv1 "github.com/nightloom/nightloom/proto/nightloom/v1"
)

// checkConstraintSet validates a constraint set (common.proto ranges).
func checkConstraintSet(v *violations, path string, c *nightloomv1.ConstraintSet) {
	if c == nil {
		return
	}
	if c.MaxAirmass != nil {
		// 40 is the constraint evaluator's ceiling (airmass 40 is about
		// 0.3 deg of altitude, Kasten & Young 1989).
		rangeCheck(v, path+".max_airmass", c.GetMaxAirmass(), 1, 40)
	}
	if c.MinAltitudeDeg != nil {
		rangeCheck(v, path+".min_altitude_deg", c.GetMinAltitudeDeg(), -10, 90)
	}
	if c.MaxAltitudeDeg != nil {
		rangeCheck(v, path+".max_altitude_deg", c.GetMaxAltitudeDeg(), 0, 90)
		if c.MinAltitudeDeg != nil && !(c.GetMaxAltitudeDeg() > c.GetMinAltitudeDeg()) {
			v.add(path+".max_altitude_deg", "must be above min_altitude_deg (%v)", c.GetMinAltitudeDeg())
		}
	}
	if c.MinMoonSeparationDeg != nil {
		rangeCheck(v, path+".min_moon_separation_deg", c.GetMinMoonSeparationDeg(), 0, 180)
	}
	if c.MaxMoonIllumination != nil {
		rangeCheck(v, path+".max_moon_illumination", c.GetMaxMoonIllumination(), 0, 1)
	}
	if c.MinSolarElongationDeg != nil {
		rangeCheck(v, path+".min_solar_elongation_deg", c.GetMinSolarElongationDeg(), 0, 180)
	}
	enumKnown(v, path+".required_darkness", int32(c.GetRequiredDarkness()), nightloomv1.Darkness_name, true)
	if c.MaxSkyBrightnessVMagArcsec2 != nil {
		rangeCheck(v, path+".max_sky_brightness_v_mag_arcsec2", c.GetMaxSkyBrightnessVMagArcsec2(), 10, 25)
	}
	if c.FaintestMagnitude != nil {
		rangeCheck(v, path+".faintest_magnitude", c.GetFaintestMagnitude(), -30, 30)
	}
	if w := c.GetLocalTimeWindow(); w != nil {
		p := path + ".local_time_window"
		okS := checkTimeOfDay(v, p+".start", w.GetStart())
		okE := checkTimeOfDay(v, p+".end", w.GetEnd())
		if okS && okE && w.GetStart().GetHour() == w.GetEnd().GetHour() && w.GetStart().GetMinute() == w.GetEnd().GetMinute() {
			v.add(p+".end", "must differ from start (an empty window)")
		}
	}
	if c.MaxHourAngleDeg != nil {
		rangeCheck(v, path+".max_hour_angle_deg", c.GetMaxHourAngleDeg(), 0, 180)
	}
	if c.MaxTrailingPx != nil {
		// 1000 px is the constraint evaluator's ceiling.
		positiveUpTo(v, path+".max_trailing_px", c.GetMaxTrailingPx(), 1000)
	}
}

func checkTimeOfDay(v *violations, path string, t *nightloomv1.LocalTimeOfDay) bool {
	if t == nil {
		v.add(path, "is required")
		return false
	}
	n := len(v.list)
	intRange(v, path+".hour", int64(t.GetHour()), 0, 23)
	intRange(v, path+".minute", int64(t.GetMinute()), 0, 59)
	return len(v.list) == n
}

func timeOfDay(t *nightloomv1.LocalTimeOfDay) time.Duration {
	return time.Duration(t.GetHour())*time.Hour + time.Duration(t.GetMinute())*time.Minute
}

// tinyLimit stands for a limit of exactly 0 where the constraint evaluator
// reads 0 as "no limit": the smallest positive float64 refuses every
// positive value and accepts 0 itself.
const tinyLimit = math.SmallestNonzeroFloat64

// constraintSet converts a validated API constraint set to the evaluator's.
// moving and hasMagLaw describe the target: the faintest-magnitude limit
// applies only to an orbit target with a magnitude law (common.proto,
// target.proto). Date limits are not set here (see dateLimits).
func constraintSet(c *nightloomv1.ConstraintSet, hasMagLaw bool) *constraints.Set {
	s := &constraints.Set{MinAltDeg: domainMinAltDeg}
	if c == nil {
		return s
	}
	orZero := func(x float64) float64 {
		if x == 0 {
			return tinyLimit
		}
		return x
	}
	if c.MaxAirmass != nil {
		s.MaxAirmass = c.GetMaxAirmass()
	}
	if c.MinAltitudeDeg != nil {
		s.MinAltDeg = math.Max(c.GetMinAltitudeDeg(), domainMinAltDeg)
	}
	if c.MaxAltitudeDeg != nil {
		s.MaxAltDeg = orZero(c.GetMaxAltitudeDeg())
		if s.MaxAltDeg <= s.MinAltDeg {
			s.MaxAltDeg = math.Nextafter(s.MinAltDeg, 100)
		}
	}
	s.MinMoonSepDeg = c.GetMinMoonSeparationDeg()
	if c.MaxMoonIllumination != nil {
		s.MaxMoonIllum = orZero(c.GetMaxMoonIllumination())
	}
	s.MoonIllumWhenUp = c.GetMoonIlluminationOnlyWhenUp()
	s.MinSolarElongDeg = c.GetMinSolarElongationDeg()
	switch c.GetRequiredDarkness() {
	case nightloomv1.Darkness_DARKNESS_CIVIL:
		s.Darkness = constraints.DarkCivil
	case nightloomv1.Darkness_DARKNESS_NAUTICAL:
		s.Darkness = constraints.DarkNautical
	case nightloomv1.Darkness_DARKNESS_ASTRONOMICAL:
		s.Darkness = constraints.DarkAstronomical
	default:
		s.Darkness = constraints.DarkSunset
	}
	if c.MaxSkyBrightnessVMagArcsec2 != nil {
		s.MinSkyMag = c.GetMaxSkyBrightnessVMagArcsec2()
	}
	if c.FaintestMagnitude != nil && hasMagLaw {
		s.FaintestMag = orZero(c.GetFaintestMagnitude())
	}
	if w := c.GetLocalTimeWindow(); w != nil {
		s.LocalStart, s.LocalEnd = timeOfDay(w.GetStart()), timeOfDay(w.GetEnd())
		if s.LocalStart == 0 && s.LocalEnd == 0 {
			s.LocalEnd = time.Nanosecond // unreachable: start == end is refused
		}
	}
	if c.MaxHourAngleDeg != nil {
		s.MaxHourAngleDeg = orZero(c.GetMaxHourAngleDeg())
	}
	if c.MaxTrailingPx != nil {
		s.MaxTrailPixels = c.GetMaxTrailingPx()
	}
	return s
}

// hasMagLaw reports whether a target has a magnitude law (a body always
// has one, except that the Moon's is rough).
func hasMagLaw(t *nightloomv1.Target) bool {
	return t.GetBody() != nil || t.GetOrbit() != nil && t.GetOrbit().GetMagnitudeLaw() != nil
}

// normalizeBlock returns a copy of b without its output-only fields: the
// form stored as the block's spec.
func normalizeBlock(b *nightloomv1.Block) *nightloomv1.Block {
	c := proto.Clone(b).(*nightloomv1.Block)
	c.Id, c.FramesDone, c.State, c.CreateTime, c.UpdateTime = "", 0, nightloomv1.BlockState_BLOCK_STATE_UNSPECIFIED, nil, nil
	return c
}

// checkBlockStatic validates what a block says about itself (queue.proto),
// before its site and target are looked up.
func checkBlockStatic(v *violations, path string, b *nightloomv1.Block) {
	if b == nil {
		v.add(path, "is required")
		return
	}
	if b.GetNetworkId() == "" {
		requiredID(v, path+".site_id", b.GetSiteId())
		if len(b.GetAllowedSiteIds()) > 0 {
			v.add(path+".allowed_site_ids", "only for a network block (network_id)")
		}
		if b.GetNeeds() != nil {
			v.add(path+".needs", "only for a network block (network_id)")
		}
	} else {
		optionalID(v, path+".site_id", b.GetSiteId())
		requiredID(v, path+".network_id", b.GetNetworkId())
		checkAllowedSites(v, path+".allowed_site_ids", b.GetAllowedSiteIds())
		checkNeeds(v, path+".needs", b.GetNeeds())
	}
	requiredID(v, path+".target_id", b.GetTargetId())
	text(v, path+".label", b.GetLabel(), 0, MaxLabelBytes)
	text(v, path+".filter", b.GetFilter(), 1, MaxFilterBytes)
	positiveDuration(v, path+".exposure", b.GetExposure(), time.Hour)
	intRange(v, path+".frames_wanted", int64(b.GetFramesWanted()), 1, MaxFramesWanted)
	want := int64(max(b.GetFramesWanted(), 1))
	intRange(v, path+".min_run_frames", int64(b.GetMinRunFrames()), 0, want)
	minRun := int64(max(b.GetMinRunFrames(), 1))
	if b.GetMaxRunFrames() != 0 {
		intRange(v, path+".max_run_frames", int64(b.GetMaxRunFrames()), minRun, want)
	}
	intRange(v, path+".priority", int64(b.GetPriority()), 1, 10)
	checkConstraintSet(v, path+".constraints", b.GetConstraints())
	e, okE := localDate(v, path+".earliest_date", b.GetEarliestDate(), false)
	l, okL := localDate(v, path+".latest_date", b.GetLatestDate(), false)
	if okE && okL && l.Before(e) {
		v.add(path+".latest_date", "must not be before earliest_date")
	}
	if c := b.GetCadence(); c != nil {
		every := duration(v, path+".cadence.interval", c.GetInterval(), 5*time.Minute, 7*24*time.Hour, 0, true)
		if every > 0 {
			duration(v, path+".cadence.tolerance", c.GetTolerance(), 0, every/2, 0, false)
		}
	}
	intRange(v, path+".dither_every_frames", int64(b.GetDitherEveryFrames()), 0, MaxDitherEvery)
	if b.GetProgram() != "" {
		checkProgramName(v, path+".program", b.GetProgram())
	}
}

// checkBlockRefs validates what depends on the block's site and target:
// the filter must be one of the site's, and non-sidereal tracking needs an
// orbit target.
func checkBlockRefs(v *violations, path string, b *nightloomv1.Block, site *nightloomv1.Site, target *nightloomv1.Target) {
	if b.GetNetworkId() != "" {
		// checkNetworkBlock checks the filter against the members.
	} else if fs := site.GetInstrument().GetFilters(); len(fs) > 0 {
		found := false
		for _, f := range fs {
			found = found || f == b.GetFilter()
		}
		if !found {
			v.add(path+".filter", "filter %q is not one of site %s's filters %q", b.GetFilter(), site.GetId(), fs)
		}
	}
	if b.GetNonSiderealTracking() && target.GetOrbit() == nil && target.GetBody() == nil {
		v.add(path+".non_sidereal_tracking", "is only for orbit and body targets; target %s is fixed", target.GetId())
	}
}

// blockProto decodes a stored block into the API message, with its state as
// the API defines it: a queued block whose latest night is over is EXPIRED
// (site gives the night's end; nil when unknown).
func blockProto(rec store.Block, site *siteModel, now time.Time) (*nightloomv1.Block, error) {
	b := &nightloomv1.Block{}
	if err := proto.Unmarshal(rec.Spec, b); err != nil {
		return nil, err
	}
	b.Id = rec.ID
	b.SiteId, b.TargetId, b.NetworkId = rec.SiteID, rec.TargetID, rec.NetworkID
	// The store's reference is the truth: it is cleared when the program
	// is deleted.
	b.Program = rec.Program
	b.FramesWanted, b.FramesDone = int32(rec.FramesWanted), int32(rec.FramesDone)
	b.CreateTime, b.UpdateTime = timestamppb.New(rec.CreatedAt), timestamppb.New(rec.UpdatedAt)
	switch rec.State {
	case store.StateQueued:
		b.State = nightloomv1.BlockState_BLOCK_STATE_OPEN
		if site != nil && blockExpired(b, site, now) {
			b.State = nightloomv1.BlockState_BLOCK_STATE_EXPIRED
		}
	case store.StateCompleted:
		b.State = nightloomv1.BlockState_BLOCK_STATE_COMPLETED
	case store.StateWithdrawn:
		b.State = nightloomv1.BlockState_BLOCK_STATE_WITHDRAWN
	}
	return b, nil
}

// blockExpired reports whether the night of the block's latest_date is over
// at now (it ends at local mean-solar noon of the next day).
func blockExpired(b *nightloomv1.Block, site *siteModel, now time.Time) bool {
	if b.GetLatestDate() == nil {
		return false
	}
	_, end := site.nightWindow(civilOf(b.GetLatestDate()))
	return !now.Before(end)
}

// nightAllowed reports whether a block may run on the night of date d
// (its earliest_date..latest_date nights).
func nightAllowed(b *nightloomv1.Block, d time.Time) bool {
	if e := b.GetEarliestDate(); e != nil && d.Before(civilOf(e)) {
		return false
	}
	if l := b.GetLatestDate(); l != nil && d.After(civilOf(l)) {
		return false
	}
	return true
}

// dateLimits sets the evaluator's civil-date limits for an explicit
// interval (not a night): the evaluator compares each step's local civil
// date, so the night of D is approximated by the civil dates D (evening)
// and D+1 (morning): earliest D, latest D+1.
func dateLimits(s *constraints.Set, b *nightloomv1.Block) {
	if e := b.GetEarliestDate(); e != nil {
		s.Earliest = civilOf(e)
	}
	if l := b.GetLatestDate(); l != nil {
		s.Latest = civilOf(l).AddDate(0, 0, 1)
	}
}
