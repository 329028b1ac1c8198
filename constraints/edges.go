package constraints

import (
	"math"
	"sync"
	"time"

	"github.com/nightloom/nightloom/ephem"
)

// Interval is a span [Start, End) during which a block's constraints hold
// at every instant (see Grid.Intervals).
type Interval struct {
	Start, End time.Time
}

// EdgeResolution is how close Grid.Intervals brings an edge to the instant
// where a constraint starts to fail: the interval's end is an instant
// checked observable, less than EdgeResolution before one checked not.
const EdgeResolution = time.Second

// Intervals returns the block's observable time as continuous intervals:
// every instant of each interval satisfies the request, not only the grid's
// samples. v must be g.Evaluate(tr, req).
//
// Method. Each window of observable samples is widened or narrowed to the
// true crossings on either side by bisection on a direct evaluation at the
// instant (a one-step grid: the target and the Earth's rotation computed
// afresh, the Sun, the Moon and nutation interpolated between the grid's
// exact samples by ephem.Between, under 0.003 arcsec), to
// EdgeResolution. Between two observable instants a and b the constraints
// are then certified, not assumed: every constraint c has a margin m_c
// (how far it is from failing) and a bound L_c on how fast that margin can
// change, and with tau_c = m_c / L_c (seconds of guaranteed slack)
//
//	tau_c(a) + tau_c(b) >= b - a for every c
//
// proves that no c fails inside [a, b] (a Lipschitz argument: m_c(t) >=
// max(m_c(a) - L_c (t-a), m_c(b) - L_c (b-t)) > 0). Where the certificate
// fails the interval is halved and its midpoint evaluated directly; a
// failing midpoint splits the interval at crossings found by bisection.
// Intervals shorter than EdgeResolution between two observable instants
// are accepted.
//
// The bounds L_c: the altitude of a fixed target changes at most at
// omega cos(latitude) (omega the sidereal rate), times 1.5 for refraction
// near the horizon; azimuth at omega (|sin lat| + |cos lat| tan alt); the
// hour angle at omega; the Sun's separation from a fixed target at the
// Sun's own motion (under 1.02 deg/day, 2.1e-7 rad/s, plus diurnal
// parallax: 2.5e-7 rad/s is used), which makes the solar-avoidance floor
// provably kept between samples; the Moon's separation at 5e-6 rad/s
// (its motion, up to 3.1e-6 rad/s, plus its diurnal parallax, 1.3e-6
// rad/s); the Moon's illuminated fraction at 2e-6 per second; the Sun's
// altitude (darkness) at omega cos(latitude). Moving targets add twice
// their largest angular rate on the grid to every angle's bound. The sky
// brightness, the target's magnitude and its rate (trailing) have no
// closed-form bound: theirs is estimated as three times the largest change
// between neighbouring samples plus a floor, which is conservative for the
// smooth models used but not a proof.
func (g *Grid) Intervals(tr *Track, req Request, v *Visibility) []Interval {
	c := newCertifier(g, tr, req)
	var xs []float64 // pairs of seconds from the grid's start
	h := g.Step.Seconds()
	for _, w := range v.Windows {
		// The window's first and last samples are observable.
		a, ta := float64(w.Start)*h, c.sample(w.Start)
		if w.Start > 0 {
			tb := c.sample(w.Start - 1)
			a, ta = c.bisect(a, ta, a-h, &tb)
		}
		var b float64
		var tb taus
		if w.End < g.N {
			bs := c.sample(w.End)
			b, tb = c.bisect(float64(w.End-1)*h, c.sample(w.End-1), float64(w.End)*h, &bs)
		} else {
			b = float64(g.N) * h
			r, tend := c.point(b)
			tb = tend
			if r != OK {
				b, tb = c.bisect(float64(w.End-1)*h, c.sample(w.End-1), b, &tend)
			}
		}
		// Checkpoints: a, the samples strictly inside (a, b), b.
		px, pt := a, ta
		for i := w.Start; i < w.End; i++ {
			x := float64(i) * h
			if x <= px || x >= b {
				continue
			}
			// Far from every limit, the slack at px alone proves the next
			// samples observable (Lipschitz, one-sided): skip them.
			if j := i + skipSamples - 1; skipSamples > 1 && j < w.End {
				if xj := float64(j) * h; xj < b && c.reaches(&pt, xj-px) {
					xs = appendSpan(xs, px, xj)
					px, pt = xj, c.sample(j)
					i = j
					continue
				}
			}
			t := c.sample(i)
			xs = c.segment(xs, px, pt, x, t)
			px, pt = x, t
		}
		if b > px {
			xs = c.segment(xs, px, pt, b, tb)
		} else if b == px && len(xs)%2 == 0 {
			xs = append(xs, px, px) // a single observable instant: dropped below
		}
	}
	out := make([]Interval, 0, len(xs)/2)
	for k := 0; k+1 < len(xs); k += 2 {
		if xs[k+1] <= xs[k] {
			continue
		}
		out = append(out, Interval{Start: g.at(xs[k]), End: g.at(xs[k+1])})
	}
	return out
}

// at converts seconds from the grid's start to an instant (nanoseconds).
func (g *Grid) at(x float64) time.Time {
	return g.Start.Add(time.Duration(math.Round(x * 1e9)))
}

// Constraint margins, in seconds of guaranteed slack (tau in Intervals).
const (
	tauDate = iota
	tauClock
	tauDark
	tauHorizon
	tauMinAlt
	tauMaxAlt
	tauAirmass
	tauHA
	tauFloor
	tauElong
	tauMoonSep
	tauMoonIllum
	tauSky
	tauMag
	tauTrail
	tauFlip
	numTau
)

// taus is the slack of every constraint at one instant: t in seconds
// (margin over its rate bound, Lipschitz), and for the constraints with a
// bound on their second derivative the margin m and that bound k (0: none).
type taus struct {
	t, m, k [numTau]float64
	// absAlt is |altitude| and hm the margin above the horizon profile
	// (rad), for slack over more than one step (reaches).
	absAlt, hm float64
}

// certifier holds one block's limits and rate bounds for Intervals.
type certifier struct {
	g   *Grid
	tr  *Track
	req Request
	lim limits

	h                   float64 // grid step, seconds
	altRate, haRate     float64 // rad/s
	own                 float64 // the target's own angular rate bound, rad/s
	sunSepRate, moonSep float64 // rad/s
	moonAltRate         float64
	sunAltRate          float64
	slope               float64 // steepest horizon-profile slope, rad/rad
	sinLat, cosLat      float64
	altX                float64 // apparent altitude of the airmass limit, rad (-Inf: none)
	darkThr             float64 // Sun altitude that the darkness asks for, rad
	dayFrom, dayTo      time.Time
}

// Rate bounds (see Intervals), per second.
const (
	omegaSidereal    = 7.2921159e-5 // rad/s
	refractionFactor = 1.5          // d(apparent)/d(geometric) altitude near the horizon, bounded
	sunMotionBound   = 2.5e-7       // rad/s
	moonMotionBound  = 5e-6         // rad/s
	illumRateBound   = 2e-6         // illuminated fraction per second
	sepCurvature     = 1e-11        // rad/s^2: the Sun's separation from a fixed target and a fixed target's hour angle
	sepSlack         = 5e-7         // rad: float32 tracks and the hourly apparent place
	altSlack         = 5e-7         // rad
)

func newCertifier(g *Grid, tr *Track, req Request) *certifier {
	c := &certifier{g: g, tr: tr, req: req, lim: newLimits(g, tr, req), h: g.Step.Seconds()}
	lat := g.Site.Observer.LatRad
	c.sinLat, c.cosLat = math.Abs(math.Sin(lat)), math.Abs(math.Cos(lat))
	if tr.Target.Moving() {
		m := 0.0
		for i := range tr.RateRA {
			if r := math.Hypot(float64(tr.RateRA[i]), float64(tr.RateDec[i])); r > m {
				m = r
			}
		}
		c.own = 2*m*ephem.Deg2Rad/3600/60 + 1e-9
	}
	c.altRate = refractionFactor*(omegaSidereal*c.cosLat+c.own) + 1e-9
	c.haRate = omegaSidereal*1.003 + c.own*50 // 1/cos(dec) <= 50 off the poles' last 1.2 deg
	c.sunSepRate = sunMotionBound + c.own
	c.moonSep = moonMotionBound + c.own
	c.moonAltRate = refractionFactor * (omegaSidereal*c.cosLat + moonMotionBound)
	c.sunAltRate = omegaSidereal*c.cosLat + sunMotionBound
	c.slope = g.Site.Horizon.maxSlope()
	c.altX = math.Inf(-1)
	if x := c.lim.maxX; !math.IsInf(x, 1) {
		c.altX = altitudeOfAirmass(x)
	}
	set := c.lim.set
	c.darkThr = [...]float64{ephem.SunriseAltDeg, ephem.CivilAltDeg, ephem.NauticalAltDeg, ephem.AstronomicalAltDeg}[set.Darkness] * ephem.Deg2Rad
	loc := g.Site.Location
	if loc == nil {
		loc = time.UTC
	}
	if !set.Earliest.IsZero() {
		y, m, d := set.Earliest.Date()
		c.dayFrom = time.Date(y, m, d, 0, 0, 0, 0, loc)
	}
	if !set.Latest.IsZero() {
		y, m, d := set.Latest.Date()
		c.dayTo = time.Date(y, m, d+1, 0, 0, 0, 0, loc)
	}
	return c
}

// altitudeOfAirmass inverts Kasten & Young's airmass (ephem.Airmass) by
// bisection: the apparent altitude (rad) where the airmass is x >= 1.
func altitudeOfAirmass(x float64) float64 {
	lo, hi := 0.0, math.Pi/2
	for k := 0; k < 60; k++ {
		m := (lo + hi) / 2
		if ephem.Airmass(m) > x {
			lo = m
		} else {
			hi = m
		}
	}
	return hi
}

// maxSlope is the steepest slope of the profile between neighbouring
// points (wrapping through north), rad of altitude per rad of azimuth.
func (h *Horizon) maxSlope() float64 {
	n := len(h.az)
	s := 0.0
	for i := 0; i < n && n > 1; i++ {
		j := (i + 1) % n
		daz := h.az[j] - h.az[i]
		if j == 0 {
			daz += 2 * math.Pi
		}
		if daz > 0 {
			s = math.Max(s, math.Abs(h.alt[j]-h.alt[i])/daz)
		}
	}
	return s
}

// sample is the slack at grid step i.
func (c *certifier) sample(i int) taus { return c.taus(c.g, c.tr, i, c.g.Time(i)) }

// point evaluates the request directly at x seconds from the grid's start
// (CheckAt): the reason and the slack (negative where a constraint fails).
func (c *certifier) point(x float64) (Reason, taus) {
	t := c.g.at(x)
	r, pg, ptr := c.g.checkAt(c.tr.Target, c.req, t)
	if pg == nil {
		return r, taus{}
	}
	return r, c.taus(pg, ptr, 0, t)
}

// CheckAt evaluates a request at one instant directly, on a one-step grid
// of the same site and options (the target and the Earth's rotation
// computed afresh at t; the Sun, the Moon and nutation from ephem.Between
// when t lies between two of g's samples, else ephem.Prepare): OK or the
// first failing reason.
func (g *Grid) CheckAt(target *Target, req Request, t time.Time) Reason {
	r, _, _ := g.checkAt(target, req, t)
	return r
}

func (g *Grid) checkAt(target *Target, req Request, t time.Time) (Reason, *Grid, *Track) {
	pg, err := g.pointGrid(t)
	if err != nil {
		return ReasonDate, nil, nil
	}
	ptr, err := pg.Track(target)
	if err != nil {
		return ReasonDate, nil, nil
	}
	return pg.Evaluate(ptr, req).Reason[0], pg, ptr
}

// bisect narrows [ok, bad] (either order) to EdgeResolution around a
// crossing and returns the observable end with its slack. With the slack
// at bad (tbad, nil if unknown) it first tries where the failing
// constraint's slack, interpolated linearly, crosses zero, and brackets
// that guess by EdgeResolution (regula falsi, one step); bisection
// finishes when the guess misses.
func (c *certifier) bisect(ok float64, tok taus, bad float64, tbad *taus) (float64, taus) {
	res := EdgeResolution.Seconds()
	if tbad != nil && math.Abs(bad-ok) > 2*res {
		f := math.Inf(1)
		for k := tauDark; k < numTau; k++ { // date and clock slacks are distances, not signed
			a, b := tok.t[k], tbad.t[k]
			if b < 0 && a >= 0 && !math.IsInf(a, 0) && !math.IsInf(b, 0) {
				f = math.Min(f, a/(a-b))
			}
		}
		if f < 1 {
			dir := math.Copysign(1, bad-ok)
			est := ok + f*(bad-ok)
			p1 := est - dir*res/2
			if (p1-ok)*dir > 0 && (bad-p1)*dir > res {
				if r, t := c.point(p1); r == OK {
					ok, tok = p1, t
					p2 := p1 + dir*res
					if r2, t2 := c.point(p2); r2 != OK {
						bad = p2
					} else {
						ok, tok = p2, t2
					}
				} else {
					bad = p1
				}
			}
		}
	}
	for math.Abs(bad-ok) > res {
		m := (ok + bad) / 2
		if r, t := c.point(m); r == OK {
			ok, tok = m, t
		} else {
			bad = m
		}
	}
	return ok, tok
}

// skipSamples is how many grid steps Intervals tries to certify at once
// from one checkpoint's slack (reaches).
var skipSamples = 8 // a variable for the test that compares with 1

// reaches reports whether the slack ts at an instant x proves [x, x+d]
// observable by the Lipschitz bounds alone (tau_c(x) >= d for every c): the
// rate bounds of Intervals hold over any span, except the azimuth's, which
// is bounded here from the altitude reachable in d rather than in one step,
// and the estimated rates (sky brightness, magnitude, trailing), for which
// it never answers yes.
func (c *certifier) reaches(ts *taus, d float64) bool {
	for k, v := range ts.t {
		switch k {
		case tauSky, tauMag, tauTrail:
			if !math.IsInf(v, 1) {
				return false
			}
			continue
		case tauHorizon:
			hmax := math.Min(ts.absAlt+c.altRate*d+ephem.Deg2Rad, 89*ephem.Deg2Rad)
			az := omegaSidereal*(c.sinLat+c.cosLat*math.Tan(hmax)) + c.own/math.Cos(hmax)
			v = ts.hm / (c.altRate + c.slope*az)
		}
		if !(v >= d) { // NaN fails
			return false
		}
	}
	return true
}

// certified reports whether the slack at a and b proves [a, b] observable:
// for every constraint, the Lipschitz certificate or the curvature one.
func certified(ta, tb *taus, d float64) bool {
	for c := range ta.t {
		if ta.t[c]+tb.t[c] >= d { // NaN fails
			continue
		}
		if k := math.Max(ta.k[c], tb.k[c]); k > 0 && curvatureOK(ta.m[c], tb.m[c], k, d) {
			continue
		}
		return false
	}
	return true
}

// curvatureOK reports whether a function with values ma >= 0 and mb >= 0 at
// the ends of an interval of length h, and |second derivative| <= k, stays
// non-negative on it: it lies above the chord less (k/2)(t-a)(b-t), a
// parabola whose minimum is checked exactly.
func curvatureOK(ma, mb, k, h float64) bool {
	if !(ma >= 0 && mb >= 0) {
		return false
	}
	c := k * h * h / 2
	u := (c + ma - mb) / (2 * c)
	if u <= 0 || u >= 1 {
		return true
	}
	return ma-(c+ma-mb)*(c+ma-mb)/(4*c) >= 0
}

// segment appends the observable intervals of [a, b] (both observable) to
// xs, merging with the last one when it ends at a.
func (c *certifier) segment(xs []float64, a float64, ta taus, b float64, tb taus) []float64 {
	if certified(&ta, &tb, b-a) || b-a <= EdgeResolution.Seconds() {
		return appendSpan(xs, a, b)
	}
	m := (a + b) / 2
	r, tm := c.point(m)
	if r == OK {
		xs = c.segment(xs, a, ta, m, tm)
		return c.segment(xs, m, tm, b, tb)
	}
	e1, t1 := c.bisect(a, ta, m, &tm)
	s2, t2 := c.bisect(b, tb, m, &tm)
	xs = c.segment(xs, a, ta, e1, t1)
	return c.segment(xs, s2, t2, b, tb)
}

// appendSpan adds [a, b] to the pairs in xs, extending the last pair when
// it ends at a.
func appendSpan(xs []float64, a, b float64) []float64 {
	if n := len(xs); n >= 2 && xs[n-1] == a {
		xs[n-1] = b
		return xs
	}
	return append(xs, a, b)
}

// taus computes the slack of every constraint at step i of grid g (the
// block's grid or a one-step grid), instant t. Unused constraints have
// +Inf; a value that cannot be bounded (NaN) fails the certificate.
func (c *certifier) taus(g *Grid, tr *Track, i int, t time.Time) taus {
	var sl taus
	s := &sl.t
	for k := range s {
		s[k] = math.Inf(1)
	}
	// curv sets a constraint's margin and curvature bound.
	curv := func(c int, m, k float64) { sl.m[c], sl.k[c] = m, k }
	l := &c.lim
	set := l.set
	alt := float64(tr.Alt[i])
	if !set.Earliest.IsZero() {
		s[tauDate] = t.Sub(c.dayFrom).Seconds()
	}
	if !set.Latest.IsZero() {
		s[tauDate] = math.Min(s[tauDate], c.dayTo.Sub(t).Seconds())
	}
	if set.LocalStart != 0 || set.LocalEnd != 0 {
		clk := g.clock[i].Seconds() + float64(t.Nanosecond())/1e9
		day := 86400.0
		d1 := math.Mod(clk-set.LocalStart.Seconds()+day, day)
		d2 := math.Mod(set.LocalEnd.Seconds()-clk+day, day)
		s[tauClock] = math.Min(d1, d2)
	}
	s[tauDark] = (c.darkThr - g.SunAlt[i]) / c.sunAltRate
	curv(tauDark, c.darkThr-g.SunAlt[i], c.curvature(math.Abs(g.SunAlt[i]), 0, false))
	// Horizon: altitude minus the profile at the azimuth; the azimuth's
	// rate grows with the altitude (bounded over one grid step).
	azRate := c.azRate(math.Abs(alt), c.own)
	sl.absAlt, sl.hm = math.Abs(alt), alt-g.Site.Horizon.AltitudeAt(float64(tr.Az[i]))-altSlack
	s[tauHorizon] = sl.hm / (c.altRate + c.slope*azRate)
	// curvature(|alt|, own, true), sharing the azimuth's rate bound.
	kAlt := c.curvatureAz(azRate, c.own, true)
	if c.slope == 0 { // a flat profile: the altitude's curvature
		curv(tauHorizon, alt-g.Site.Horizon.AltitudeAt(float64(tr.Az[i]))-altSlack, kAlt)
	}
	if l.minAlt > -math.Pi/2 {
		s[tauMinAlt] = (alt - l.minAlt - altSlack) / c.altRate
		curv(tauMinAlt, alt-l.minAlt-altSlack, kAlt)
	}
	if !math.IsInf(l.maxAlt, 1) {
		s[tauMaxAlt] = (l.maxAlt - alt - altSlack) / c.altRate
		curv(tauMaxAlt, l.maxAlt-alt-altSlack, kAlt)
	}
	if !math.IsInf(c.altX, -1) {
		s[tauAirmass] = (alt - c.altX - altSlack) / c.altRate
		curv(tauAirmass, alt-c.altX-altSlack, kAlt)
	}
	ha := float64(tr.HA[i])
	if !math.IsInf(l.maxHA, 1) {
		s[tauHA] = (l.maxHA - math.Abs(ha) - altSlack) / c.haRate
		if math.Abs(ha) > 1e-3 { // |HA| is linear in time away from the meridian
			curv(tauHA, l.maxHA-math.Abs(ha)-altSlack, sepCurvature+2*omegaSidereal*c.own)
		}
	}
	sun := float64(tr.SunSep[i])
	s[tauFloor] = (sun - l.floor - sepSlack) / c.sunSepRate
	curv(tauFloor, sun-l.floor-sepSlack, sepCurvature+2*omegaSidereal*c.own)
	if l.minElong > 0 {
		s[tauElong] = (sun - l.minElong - sepSlack) / c.sunSepRate
		curv(tauElong, sun-l.minElong-sepSlack, sepCurvature+2*omegaSidereal*c.own)
	}
	if l.minMoon > 0 {
		sep := (float64(tr.MoonSep[i]) - l.minMoon - sepSlack) / c.moonSep
		down := (-moonSkipAlt - g.MoonAlt[i]) / c.moonAltRate
		s[tauMoonSep] = math.Max(sep, down)
	}
	if set.MaxMoonIllum != 0 {
		s[tauMoonIllum] = (set.MaxMoonIllum - g.MoonIllum[i]) / illumRateBound
		if set.MoonIllumWhenUp {
			s[tauMoonIllum] = math.Max(s[tauMoonIllum], -g.MoonAlt[i]/c.moonAltRate)
		}
	}
	j := c.g.Index(t) // the block grid's step holding t, for estimated rates
	if g.sky != nil && set.MinSkyMag != 0 {
		s[tauSky] = (float64(tr.Sky[i]) - set.MinSkyMag) / c.estRate(c.tr.Sky, j, 1e-4)
	}
	if set.FaintestMag != 0 && tr.Mag != nil {
		s[tauMag] = (set.FaintestMag - float64(tr.Mag[i])) / c.estRate(c.tr.Mag, j, 1e-5)
	}
	if l.trailing {
		rate := math.Hypot(float64(tr.RateRA[i]), float64(tr.RateDec[i]))
		s[tauTrail] = (l.maxRateOK - rate) / math.Max(c.estRate(c.tr.RateRA, j, 1e-4), c.estRate(c.tr.RateDec, j, 1e-4))
	}
	if l.checkFlip {
		s[tauFlip] = math.Max(l.flip0-ha, ha-l.flip1) / c.haRate
	}
	return sl
}

// curvature bounds the second derivative (rad/s^2) of an altitude at
// |altitude| h: d2h/dt2 = omega cos(lat) cos(A) dA/dt with dA/dt bounded
// as in Intervals, times the refraction factor, plus refraction's own
// curvature near the horizon (d2R/dh2 < 6 per radian, Saemundsson's
// formula) times the squared rate; own is a moving target's rate bound.
func (c *certifier) curvature(h, own float64, refracted bool) float64 {
	return c.curvatureAz(c.azRate(h, own), own, refracted)
}

// azRate bounds the azimuth's rate (rad/s) over one grid step from
// |altitude| h (see Intervals); own is a moving target's rate bound.
func (c *certifier) azRate(h, own float64) float64 {
	hmax := math.Min(h+c.altRate*c.h+ephem.Deg2Rad, 89*ephem.Deg2Rad)
	return omegaSidereal*(c.sinLat+c.cosLat*math.Tan(hmax)) + own/math.Cos(hmax)
}

// curvatureAz is curvature with the azimuth's rate bound azRate given.
func (c *certifier) curvatureAz(azRate, own float64, refracted bool) float64 {
	k := omegaSidereal*c.cosLat*azRate + 3*omegaSidereal*own
	if refracted {
		rate := omegaSidereal*c.cosLat + own
		k = refractionFactor*k + 6*rate*rate
	}
	return k + 1e-12
}

// estRate estimates a bound on the rate of change (per second) of a
// sampled quantity near step j: three times the largest change between
// neighbouring samples, plus a floor. NaN samples are skipped.
func (c *certifier) estRate(x []float32, j int, floor float64) float64 {
	m := 0.0
	for k := max(0, j-1); k <= j && k+1 < len(x); k++ {
		if d := math.Abs(float64(x[k+1]) - float64(x[k])); d > m {
			m = d
		}
	}
	if j+2 < len(x) {
		if d := math.Abs(float64(x[j+2]) - float64(x[j+1])); d > m {
			m = d
		}
	}
	return 3*m/c.h + floor
}

// maxPointGrids bounds the one-step grids a grid keeps (about 3 KB each).
const maxPointGrids = 8192

// pointCache keeps the one-step grids (the Sun, the Moon and the Earth's
// orientation at one instant) that edge refinement evaluates, shared by
// every block of the grid: blocks whose windows share an edge (twilight,
// moonrise, a closure) bisect through the same instants, so each instant's
// sky is computed once. Safe for concurrent use.
type pointCache struct {
	mu sync.Mutex
	m  map[int64]*Grid
}

// ReleasePointCache drops the one-step grids that Intervals and CheckAt
// cached (they are made again when needed): a caller that keeps the grids
// of many nights, as a plan of a month does, then keeps their samples
// without thousands of instants' sky each.
func (g *Grid) ReleasePointCache() {
	if pc := g.points; pc != nil {
		pc.mu.Lock()
		pc.m = nil
		pc.mu.Unlock()
	}
}

// pointGrid returns the one-step grid at t, from the cache when it has it.
// A one-step grid is never modified after it is made. Between two of the
// grid's samples at most ephem.MaxBetweenSpan apart, its snapshot comes
// from ephem.Between (the Earth's rotation at t, the slowly changing rest
// interpolated: under 0.003 arcsec); elsewhere from ephem.Prepare.
func (g *Grid) pointGrid(t time.Time) (*Grid, error) {
	pc := g.points
	if pc == nil {
		return g.newPointGrid(t)
	}
	key := t.UnixNano()
	pc.mu.Lock()
	pg := pc.m[key]
	pc.mu.Unlock()
	if pg != nil {
		return pg, nil
	}
	pg, err := g.newPointGrid(t)
	if err != nil {
		return nil, err
	}
	pc.mu.Lock()
	if pc.m == nil {
		pc.m = make(map[int64]*Grid)
	}
	if len(pc.m) < maxPointGrids {
		pc.m[key] = pg
	}
	pc.mu.Unlock()
	return pg, nil
}

func (g *Grid) newPointGrid(t time.Time) (*Grid, error) {
	var snap func(ephem.Instant) ephem.Snapshot
	if k := int(t.Sub(g.Start) / g.Step); !t.Before(g.Start) && k+1 < g.N &&
		g.Step.Seconds() <= ephem.MaxBetweenSpan*86400-1 {
		a, b := &g.Snap[k], &g.Snap[k+1]
		snap = func(in ephem.Instant) ephem.Snapshot { return ephem.Between(a, b, in) }
	}
	return newGrid(g.Site, t, t.Add(MinStep), MinStep, g.Opts, snap)
}
