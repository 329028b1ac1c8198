package scheduler

import (
	"math"
	"time"

	"github.com/nightloom/nightloom/constraints"
	"github.com/nightloom/nightloom/ephem"
)

// Run is one stretch of a plan as a telescope executes it: an assignment,
// or one of the two parts of an assignment that a meridian flip splits (no
// exposure runs through a flip), with its pointing and predicted
// conditions at both ends computed directly (constraints.Observe). The
// server converts it to the API's Assignment; an executor can use it as
// it is.
type Run struct {
	Block  int // index into Problem.Blocks (-1 outside a problem)
	ID     string
	Target *constraints.Target
	Filter string
	// Exposure is one frame's exposure; DitherEvery as in Block.
	Exposure    time.Duration
	DitherEvery int
	// Start is the first exposure's start, End the last readout's end,
	// PrepareStart the start of the overheads before Start.
	Start, End, PrepareStart time.Time
	Frames                   int
	// Overheads spent before Start: slew, settle, filter change, focus and
	// acquisition for a run's first part; Flip (the meridian flip and any
	// wait for it) for the part after a flip.
	Overheads Spent
	// AtStart and AtEnd are the target at Start and End; QualityStart and
	// QualityEnd the quality factor there (constraints.Quality).
	AtStart, AtEnd           constraints.Observation
	QualityStart, QualityEnd float64
}

// OverheadTotal is the time between PrepareStart and Start.
func (s Spent) OverheadTotal() time.Duration {
	return s.Slew + s.Settle + s.FilterChange + s.Focus + s.Acquisition + s.Flip
}

// RunLength is End - Start of a run of n frames: n times (exposure +
// readout), plus a dither after every ditherEvery frames but not after the
// last.
func (s *Site) RunLength(exposure time.Duration, n, ditherEvery int) time.Duration {
	d := time.Duration(n) * (exposure + s.Readout)
	if ditherEvery > 0 && n > 1 {
		d += time.Duration((n-1)/ditherEvery) * s.Dither
	}
	return d
}

// TypicalSlewDeg is the axis travel assumed for the slew before a run
// when the previous pointing is unknown: 90 deg on both axes, the mean
// angular distance between random points on the sphere (our choice).
const TypicalSlewDeg = 90.0

// ShortestRun is the time the shortest useful run of n frames needs with
// the overheads before it: a typical slew, settle and acquisition, then
// the frames with readouts and dithers.
func (s *Site) ShortestRun(exposure time.Duration, n, ditherEvery int) time.Duration {
	slew := math.Max(AxisSeconds(TypicalSlewDeg, s.Axis1RateDegS, s.Axis1AccelDegS2),
		AxisSeconds(TypicalSlewDeg, s.Axis2RateDegS, s.Axis2AccelDegS2))
	return secs(slew) + s.Settle + s.Acquisition + s.RunLength(exposure, n, ditherEvery)
}

// Runs turns a plan's assignment into the runs a telescope executes: one,
// or two when a meridian flip splits it.
func (p *Problem) Runs(a *Assignment) []Run {
	blk := &p.Blocks[a.Block]
	base := Run{Block: a.Block, ID: a.ID, Target: blk.Target, Filter: blk.Filter, Exposure: blk.Exposure,
		DitherEvery: blk.DitherEvery}
	frame := blk.Exposure + p.Site.Readout
	starts := a.FrameStarts
	first := base
	first.Start, first.End, first.Frames = a.Start, a.End, a.Frames
	first.Overheads = a.Spent
	first.Overheads.Idle, first.Overheads.Flip = 0, 0
	parts := []Run{first}
	if !a.Flip.IsZero() && len(starts) == a.Frames && a.FlipBefore > 0 && a.FlipBefore < a.Frames {
		k := a.FlipBefore
		parts[0].End, parts[0].Frames = starts[k-1].Add(frame), k
		second := base
		second.Start, second.End, second.Frames = starts[k], a.End, a.Frames-k
		second.Overheads = Spent{Flip: starts[k].Sub(starts[k-1].Add(frame))}
		parts = append(parts, second)
	}
	for i := range parts {
		parts[i].PrepareStart = parts[i].Start.Add(-parts[i].Overheads.OverheadTotal())
		p.Site.observeEnds(&parts[i])
	}
	return parts
}

// observeEnds fills a run's observations and qualities at Start and End.
func (s *Site) observeEnds(r *Run) {
	r.AtStart = constraints.Observe(s.Site, r.Target, r.Start)
	r.AtEnd = constraints.Observe(s.Site, r.Target, r.End)
	r.QualityStart = constraints.Quality(s.Site, r.AtStart)
	r.QualityEnd = constraints.Quality(s.Site, r.AtEnd)
}

// Truncate ends a run at cut with the frames that still fit, and
// recomputes its conditions at the new end (a closure overlaps the run in
// progress). ok is false when no frame fits.
func (s *Site) Truncate(r Run, cut time.Time) (Run, bool) {
	n := r.Frames
	for n > 0 && r.Start.Add(s.RunLength(r.Exposure, n, r.DitherEvery)).After(cut) {
		n--
	}
	if n == 0 {
		return Run{}, false
	}
	if n == r.Frames {
		return r, true
	}
	r.Frames = n
	r.End = r.Start.Add(s.RunLength(r.Exposure, n, r.DitherEvery))
	s.observeEnds(&r)
	return r, true
}

// TelescopeState is what a telescope reports of itself when it asks for
// its next run. Zero fields are unknown.
type TelescopeState struct {
	HasPosition   bool
	AltDeg, AzDeg float64 // where the mount points (apparent)
	Filter        string  // the filter in place
	LastFocus     time.Time
}

// Focus policy of a site, for dispatching from a telescope's state.
func (s *Site) focusDue(changed bool, start, last time.Time) bool {
	if s.Focus <= 0 {
		return false
	}
	return s.FocusEvery > 0 && start.Sub(last) >= s.FocusEvery || changed && s.FocusOnFilterChange
}

// Redispatch adjusts a planned run for the telescope asking for it at now
// (a run already in progress is the caller's to return as it is):
// the frames its block still wants (framesLeft), the overheads from the
// telescope's actual state (the slew from where the mount points, the
// filter in place, the last focus), and a later start when the
// preparations cannot begin before now. Conditions are recomputed for a
// run that changes; a run moved later keeps only the frames that still
// end inside the block's constraints (req; nil skips the check).
// asPlanned is false when anything changed; ok is false when the run has
// nothing left to do.
func (s *Site) Redispatch(r Run, framesLeft int, st *TelescopeState, req *constraints.Request, now time.Time) (out Run, asPlanned, ok bool) {
	if framesLeft <= 0 {
		return Run{}, false, false
	}
	out = r
	asPlanned = true
	if out.Frames > framesLeft {
		out.Frames = framesLeft
		out.End = out.Start.Add(s.RunLength(out.Exposure, framesLeft, out.DitherEvery))
		asPlanned = false
	}
	if st != nil && (st.HasPosition || st.Filter != "" || !st.LastFocus.IsZero()) {
		oh := out.Overheads
		if st.HasPosition {
			ha, dec := s.Observer.HorizonToHADec(st.AltDeg*ephem.Deg2Rad, st.AzDeg*ephem.Deg2Rad)
			from := Pointing{HADeg: ha * ephem.Rad2Deg, DecDeg: dec * ephem.Rad2Deg, AltDeg: st.AltDeg, AzDeg: st.AzDeg,
				PierWest: ha >= 0}
			to := Pointing{HADeg: out.AtStart.HADeg, DecDeg: out.AtStart.DecDeg, AltDeg: out.AtStart.AltDeg,
				AzDeg: out.AtStart.AzDeg, PierWest: out.AtStart.HADeg >= s.FlipStartHADeg}
			oh.Slew = s.SlewTime(from, to)
			oh.Settle = 0
			if oh.Slew > 0 {
				oh.Settle = s.Settle
			}
		}
		changed := false
		if st.Filter != "" {
			changed = st.Filter != out.Filter
			oh.FilterChange = 0
			if changed {
				oh.FilterChange = s.FilterChange
			}
		}
		if !st.LastFocus.IsZero() {
			oh.Focus = 0
			if s.focusDue(changed, out.Start, st.LastFocus) {
				oh.Focus = s.Focus
			}
		}
		if oh != out.Overheads {
			asPlanned = false
		}
		out.Overheads = oh
	}
	out.PrepareStart = out.Start.Add(-out.Overheads.OverheadTotal())
	if out.PrepareStart.Before(now) {
		// The preparations cannot begin in the past: start later.
		shift := now.Sub(out.PrepareStart)
		out.PrepareStart = now
		out.Start, out.End = out.Start.Add(shift), out.End.Add(shift)
		asPlanned = false
	}
	if !asPlanned {
		if req != nil && (out.Start.After(r.Start) || out.End.After(r.End)) {
			// Moved later: keep the frames that still end inside the
			// block's constraints.
			until := s.HoldsUntil(out.Target, *req, out.Start, out.End)
			n := out.Frames
			for n > 0 && out.Start.Add(s.RunLength(out.Exposure, n, out.DitherEvery)).After(until) {
				n--
			}
			if n == 0 {
				return Run{}, false, false
			}
			out.Frames = n
			out.End = out.Start.Add(s.RunLength(out.Exposure, n, out.DitherEvery))
		}
		s.observeEnds(&out)
	}
	return out, asPlanned, true
}

// HoldsUntil checks a run's constraints directly from start to end (a grid
// at the finest step over the run, its continuous intervals; see
// constraints.Grid.Intervals) and returns how far they hold from start:
// end when they hold throughout, start when they do not hold at start.
// Dispatch uses it before it moves a run in time.
func (s *Site) HoldsUntil(target *constraints.Target, req constraints.Request, start, end time.Time) time.Time {
	g, err := constraints.NewGrid(s.Site, start, end.Add(constraints.MinStep), constraints.MinStep, constraints.Options{})
	if err != nil {
		return start
	}
	tr, err := g.Track(target)
	if err != nil {
		return start
	}
	for _, iv := range g.Intervals(tr, req, g.Evaluate(tr, req)) {
		if !iv.Start.After(start) && iv.End.After(start) {
			if iv.End.After(end) {
				return end
			}
			return iv.End
		}
	}
	return start
}
