package constraints

import (
	"math"
	"time"

	"github.com/nightloom/nightloom/ephem"
)

// Request is one block's question to the grid: may its target be observed
// under its constraint set, with this exposure length and tracking?
type Request struct {
	Set      *Set
	Exposure time.Duration
	// NonSidereal says the mount tracks the moving target, so trailing
	// limits do not apply.
	NonSidereal bool
}

// Visibility is the answer for one block on one grid.
type Visibility struct {
	// Reason is OK where the step is observable, else the first failing
	// constraint.
	Reason []Reason
	// Quality is in (0, 1] where observable (see the package doc), 0 elsewhere.
	Quality []float32
	// Windows are the maximal runs of observable steps, in time order.
	Windows []Window
	// TrailLimit is the longest exposure that trails less than the limit
	// at the fastest rate on the grid (0 for fixed targets or no check).
	TrailLimit time.Duration
}

// Feasible reports whether step i is observable.
func (v *Visibility) Feasible(i int) bool { return v.Reason[i] == OK }

// Evaluate checks every step of a track against a block's request. The
// site's solar-avoidance floor applies whatever the set asks.
func (g *Grid) Evaluate(tr *Track, req Request) *Visibility {
	v := &Visibility{Reason: make([]Reason, g.N), Quality: make([]float32, g.N)}
	g.evaluate(v, tr, req)
	return v
}

// evaluate is Evaluate into v, whose Reason and Quality hold g.N zeroed
// steps.
func (g *Grid) evaluate(v *Visibility, tr *Track, req Request) {
	n := g.N
	l := newLimits(g, tr, req)
	c, site := l.set, g.Site
	floor, minElong, minAlt, maxAlt, maxX, maxHA, minMoon := l.floor, l.minElong, l.minAlt, l.maxAlt, l.maxX, l.maxHA, l.minMoon
	flip0, flip1, checkFlip, trailing, maxRateOK := l.flip0, l.flip1, l.checkFlip, l.trailing, l.maxRateOK
	useSky := g.sky != nil
	k := site.Sky.ExtinctionV
	dark := site.Sky.ZenithMag
	v.TrailLimit = l.trailLimit
	// Cheapest exact tests first: above every point of the horizon
	// profile or under every one, no lookup.
	hTop, hBottom := site.Horizon.top, site.Horizon.bottom

	// The set's fields and the slices in locals, so that the loop reads
	// registers and arrays only.
	checkEarliest, checkLatest := !c.Earliest.IsZero(), !c.Latest.IsZero()
	var dayFrom, dayTo time.Time
	if checkEarliest {
		dayFrom = dateOnly(c.Earliest)
	}
	if checkLatest {
		dayTo = dateOnly(c.Latest)
	}
	checkClock, clockFrom, clockTo := c.LocalStart != 0 || c.LocalEnd != 0, c.LocalStart, c.LocalEnd
	darkness := c.Darkness
	maxIllum, illumWhenUp := c.MaxMoonIllum, c.MoonIllumWhenUp
	minSky := c.MinSkyMag
	checkSky := useSky && minSky != 0
	faintest := c.FaintestMag
	checkMag := faintest != 0 && tr.Mag != nil
	horizon := &site.Horizon
	reason, qual := v.Reason[:n], v.Quality[:n]
	alts, azs, xs, has := tr.Alt[:n], tr.Az[:n], tr.Airmass[:n], tr.HA[:n]
	suns, moons, skies := tr.SunSep[:n], tr.MoonSep[:n], tr.Sky[:n]
	closed, darks, moonAlt, moonIllum := g.Closed[:n], g.Dark[:n], g.MoonAlt[:n], g.MoonIllum[:n]

	for i := 0; i < n; i++ {
		r := OK
		alt := float64(alts[i])
		switch {
		case checkEarliest && g.localDay[i].Before(dayFrom), checkLatest && g.localDay[i].After(dayTo):
			r = ReasonDate
		case checkClock && !inClock(g.clock[i], clockFrom, clockTo):
			r = ReasonLocalTime
		case closed[i]:
			r = ReasonClosure
		case !darkness.Allows(darks[i]):
			r = ReasonDaylight
		case alt < hBottom || alt < hTop && alt < horizon.AltitudeAt(float64(azs[i])):
			r = ReasonBelowHorizon
		case alt < minAlt:
			r = ReasonAltitudeLow
		case alt > maxAlt:
			r = ReasonAltitudeHigh
		case float64(xs[i]) > maxX:
			r = ReasonAirmass
		case math.Abs(float64(has[i])) > maxHA:
			r = ReasonHourAngle
		case float64(suns[i]) < floor:
			r = ReasonSolarAvoidance
		case float64(suns[i]) < minElong:
			r = ReasonSolarElongation
		case float64(moons[i]) < minMoon && moonAlt[i] > -moonSkipAlt:
			r = ReasonMoonSeparation
		case maxIllum != 0 && moonIllum[i] > maxIllum && (!illumWhenUp || moonAlt[i] > 0):
			r = ReasonMoonIllumination
		case checkSky && !(float64(skies[i]) >= minSky):
			r = ReasonSkyBrightness
		case checkMag && !(float64(tr.Mag[i]) <= faintest):
			r = ReasonTooFaint
		case trailing && math.Hypot(float64(tr.RateRA[i]), float64(tr.RateDec[i])) > maxRateOK:
			r = ReasonTrailing
		case checkFlip && float64(has[i]) >= flip0 && float64(has[i]) <= flip1:
			r = ReasonFlipZone
		}
		reason[i] = r
		if r != OK {
			continue
		}
		qual[i] = float32(quality(float64(xs[i]), float64(skies[i]), k, dark, useSky))
	}
	v.Windows = windows(v.Reason)
}

// quality is the package doc's formula, as one exp and one log:
// q = 10^(-0.8 k) X^(-1.2) 10^(-0.4 (m_dark - m_sky)), clipped to
// [1e-4, 1].
func quality(x, sky, k, dark float64, useSky bool) float64 {
	if !(x >= 1) {
		x = 1
	}
	e := -0.8*k*(x-1)*math.Ln10 - 1.2*logFast(x)
	if useSky && sky < dark {
		e -= 0.4 * (dark - sky) * math.Ln10
	}
	if math.IsInf(x, 1) {
		return 1e-4
	}
	return clamp(expFast(e), 1e-4, 1)
}

// moonSkipAlt: a Moon more than this far below the horizon (radians) does
// not count for minimum separation (its light is gone; 0.5 deg covers its
// disc and refraction).
const moonSkipAlt = 0.5 * ephem.Deg2Rad

func dateOnly(t time.Time) time.Time {
	y, m, d := t.Date()
	return time.Date(y, m, d, 0, 0, 0, 0, time.UTC)
}

// inClock reports whether a time of day lies in [start, end), wrapping
// through midnight when start > end.
func inClock(t, start, end time.Duration) bool {
	if start <= end {
		return t >= start && t < end
	}
	return t >= start || t < end
}

func windows(rs []Reason) []Window {
	var out []Window
	for i := 0; i < len(rs); {
		if rs[i] != OK {
			i++
			continue
		}
		j := i
		for j < len(rs) && rs[j] == OK {
			j++
		}
		out = append(out, Window{i, j})
		i = j
	}
	return out
}

// Spans groups consecutive steps by reason, for explanations.
func (v *Visibility) Spans(g *Grid) []Span {
	var out []Span
	for i := 0; i < len(v.Reason); {
		j := i
		for j < len(v.Reason) && v.Reason[j] == v.Reason[i] {
			j++
		}
		out = append(out, Span{Reason: v.Reason[i], Start: i, End: j, From: g.Time(i), To: g.Time(j)})
		i = j
	}
	return out
}

// Dominant returns the most frequent failing reason (OK if every step is
// observable), for "never observable tonight because ..." summaries.
func (v *Visibility) Dominant() Reason {
	var count [NumReasons]int
	for _, r := range v.Reason {
		count[r]++
	}
	best := OK
	for r := Reason(1); r < numReasons; r++ {
		if count[r] > count[best] || best == OK && count[r] > 0 {
			best = r
		}
	}
	return best
}

// limits are a request's thresholds in radians (Inf where none), shared by
// Evaluate and Intervals.
type limits struct {
	set                                          *Set
	floor, minElong, minAlt, maxAlt, maxX, maxHA float64
	minMoon, flip0, flip1                        float64
	checkFlip, trailing                          bool
	maxRateOK                                    float64 // arcsec/min one exposure tolerates
	trailLimit                                   time.Duration
}

func newLimits(g *Grid, tr *Track, req Request) limits {
	c := req.Set
	if c == nil {
		c = &Set{}
	}
	site := g.Site
	l := limits{set: c,
		floor:    math.Max(site.SolarFloorDeg, MinSolarFloorDeg) * ephem.Deg2Rad,
		minElong: c.MinSolarElongDeg * ephem.Deg2Rad,
		minAlt:   c.MinAltDeg * ephem.Deg2Rad,
		maxAlt:   math.Inf(1), maxX: math.Inf(1), maxHA: math.Inf(1),
		minMoon: c.MinMoonSepDeg * ephem.Deg2Rad,
		flip0:   site.FlipStartHADeg * ephem.Deg2Rad, flip1: site.FlipEndHADeg * ephem.Deg2Rad,
		checkFlip: c.AvoidFlipZone && site.Mount == GermanEquatorial,
	}
	if c.MaxAltDeg != 0 {
		l.maxAlt = c.MaxAltDeg * ephem.Deg2Rad
	}
	if c.MaxAirmass != 0 {
		l.maxX = c.MaxAirmass
	}
	if c.MaxHourAngleDeg != 0 {
		l.maxHA = c.MaxHourAngleDeg * ephem.Deg2Rad
	}
	// Trailing: a moving target tracked at the sidereal rate may move at
	// most px pixels during one exposure.
	l.trailing = tr.Target.Moving() && !req.NonSidereal && site.PixelScaleArcsec > 0
	if l.trailing {
		px := c.MaxTrailPixels
		if px == 0 {
			px = DefaultMaxTrailPixels
		}
		l.maxRateOK = px * site.PixelScaleArcsec / req.Exposure.Minutes()
		maxRate := 0.0
		for i := range tr.RateRA {
			maxRate = math.Max(maxRate, math.Hypot(float64(tr.RateRA[i]), float64(tr.RateDec[i])))
		}
		if maxRate > 0 {
			limit := px * site.PixelScaleArcsec / (maxRate / 60) // seconds
			l.trailLimit = time.Duration(limit * float64(time.Second))
		}
	}
	return l
}
