package scheduler

import (
	"math"
	"sync/atomic"
	"time"

	"github.com/nightloom/nightloom/constraints"
	"github.com/nightloom/nightloom/ephem"
)

// Pier sides of a german equatorial mount: sideEast while the target is
// east of the flip zone (tracking toward the meridian), sideWest after the
// flip. Other mounts are always "east".
const (
	sideEast int8 = 0
	sideWest int8 = 1
)

// prevState is what the overheads before a run depend on: the run before
// it (or the parked mount, block -1).
type prevState struct {
	block   int
	side    int8
	start   float64 // start of the previous run (focus period)
	filter  int     // -1 unknown
	focused bool    // a focus run has happened tonight
}

func (p *Problem) anchorState() prevState {
	a := p.anchor
	return prevState{block: a.block, side: a.side, start: a.start, filter: a.filter, focused: a.focused}
}

// setupParts is the itemised overhead before a run, in seconds.
type setupParts struct {
	slew, settle, filter, focus, acq float64
	doFocus                          bool
}

func (s setupParts) total() float64 {
	return math.Max(s.slew+s.settle, s.filter) + s.focus + s.acq
}

// haAt returns block b's hour angle (radians) at x seconds, linearly
// interpolated between grid samples (unwrapped across +-pi, extrapolated at
// the sidereal rate past the last sample).
func (p *Problem) haAt(b int, x float64) float64 {
	ha := p.Tracks[b].HA
	f := x / p.step
	i := int(math.Floor(f))
	switch {
	case i < 0:
		return float64(ha[0]) + x*siderealRate
	case i >= p.n-1:
		return float64(ha[p.n-1]) + (x-float64(p.n-1)*p.step)*siderealRate
	}
	h0, h1 := float64(ha[i]), float64(ha[i+1])
	d := h1 - h0
	if d > math.Pi {
		d -= 2 * math.Pi
	} else if d < -math.Pi {
		d += 2 * math.Pi
	}
	return h0 + d*(f-float64(i))
}

// siderealRate is the rate of hour angle of a fixed target, rad/s.
const siderealRate = 7.2921159e-5

// gem reports whether the site's mount flips at the meridian.
func (p *Problem) gem() bool { return p.Site.Mount == constraints.GermanEquatorial }

// startSide is the pier side of a run of block b starting at x.
func (p *Problem) startSide(b int, x float64) int8 {
	if p.gem() && p.haAt(b, x) >= p.flip0 {
		return sideWest
	}
	return sideEast
}

// axes returns the mechanical axis positions (degrees) for block b at x on
// the given side, interpolated linearly between grid samples (axis 1
// across its wrap). For the previous block (tracked), a german mount on
// the east side stops at the flip limit. b = -1 is the park position (the
// zenith, east side).
func (p *Problem) axes(b int, x float64, side int8, prev bool) (a1, a2 float64) {
	if b < 0 {
		return p.axesOf(b, 0, side, prev)
	}
	i := p.stepAt(x)
	f := x/p.step - float64(i)
	j := i + 1
	if j >= p.n || f <= 0 {
		j, f = i, 0
	}
	u1, u2, v1, v2 := p.axesSamples(b, i, j, side, prev)
	if f == 0 {
		return u1, u2
	}
	d := v1 - u1
	if p.gem() && math.Abs(d) > 180 {
		// A german mount's axis 1 does not wrap: the samples lie on both
		// sides of the cut of this pier side (the hour angle crossed the
		// flip zone's start or end), so the axes are taken from the hour
		// angle and declination interpolated to x (hour angle is
		// continuous modulo 360), not from the axes' samples.
		tr := p.Tracks[b]
		h0, h1 := float64(tr.HA[i])*ephem.Rad2Deg, float64(tr.HA[j])*ephem.Rad2Deg
		d0, d1 := float64(tr.Dec[i])*ephem.Rad2Deg, float64(tr.Dec[j])*ephem.Rad2Deg
		dh := math.Remainder(h1-h0, 360)
		return mountAxes(p.Site.Site, h0+f*dh, d0+f*(d1-d0), 0, 0, side, prev)
	}
	// Across the wrap of axis 1 (azimuth; a fork's hour angle):
	// neighbouring samples are close.
	if d > 180 {
		d -= 360
	} else if d < -180 {
		d += 360
	}
	return u1 + f*d, u2 + f*(v2-u2)
}

// axesSamples returns block b's axes at grid steps i and j on the given
// side, from the table where it holds them (a tracked previous target on
// the east side is computed: it may have passed the flip limit).
func (p *Problem) axesSamples(b, i, j int, side int8, prev bool) (u1, u2, v1, v2 float64) {
	if p.ax == nil || prev && side == sideEast && p.gem() {
		u1, u2 = p.axesOf(b, i, side, prev)
		v1, v2 = p.axesOf(b, j, side, prev)
		return
	}
	row := p.axesRow(b)
	k, l := 4*i+2*int(side), 4*j+2*int(side)
	return float64(row[k]), float64(row[k+1]), float64(row[l]), float64(row[l+1])
}

// axesOf computes axes for block b at step i (b = -1: park).
func (p *Problem) axesOf(b, i int, side int8, prev bool) (a1, a2 float64) {
	lat := p.Site.Observer.LatRad * ephem.Rad2Deg
	var ha, dec, az, alt float64
	if b < 0 {
		ha, dec, az, alt = 0, lat, 0, 90
	} else {
		tr := p.Tracks[b]
		ha, dec = float64(tr.HA[i])*ephem.Rad2Deg, float64(tr.Dec[i])*ephem.Rad2Deg
		az, alt = float64(tr.Az[i])*ephem.Rad2Deg, float64(tr.Alt[i])*ephem.Rad2Deg
	}
	return mountAxes(p.Site.Site, ha, dec, az, alt, side, prev)
}

// mountAxes maps a pointing to the mount's mechanical axes (degrees):
// azimuth and altitude for alt-azimuth mounts, hour angle and declination
// for fork mounts, and for german equatorial mounts the pier-side axis
// angles (east side: HA + 90 with HA unwrapped below the flip zone's end;
// west side: HA - 90 and 180 - Dec). prev marks the previous target of a
// slew: a german mount tracking it on the east side has stopped at the
// flip limit.
func mountAxes(site *constraints.Site, ha, dec, az, alt float64, side int8, prev bool) (a1, a2 float64) {
	switch site.Mount {
	case constraints.AltAzimuth:
		return az, alt
	case constraints.ForkEquatorial:
		return ha, dec
	}
	f0, f1 := site.FlipStartHADeg, site.FlipEndHADeg
	if side == sideEast {
		if prev && ha > f1 && ha < f1+180 {
			ha = f1
		}
		for ha > f1 {
			ha -= 360
		}
		for ha <= f1-360 {
			ha += 360
		}
		return ha + 90, dec
	}
	for ha < f0 {
		ha += 360
	}
	for ha >= f0+360 {
		ha -= 360
	}
	return ha - 90, 180 - dec
}

// axesTable holds the mount axes of every block at every step (a1 east,
// a2 east, a1 west, a2 west, as float32), a block's row made on its first
// use: most blocks of a large night are never slewed to or from. Rows are
// published atomically (two goroutines may compute the same row; both get
// the same values), so the solver's concurrent starts may share it, and
// so may the copies of a Problem (WithState: the same tracks).
type axesTable struct {
	rows []atomic.Pointer[[]float32]
}

// precomputeAxes makes p.ax, empty.
func (p *Problem) precomputeAxes() {
	p.ax = &axesTable{rows: make([]atomic.Pointer[[]float32], len(p.Blocks))}
}

// axesRow is block b's row of p.ax.
func (p *Problem) axesRow(b int) []float32 {
	if r := p.ax.rows[b].Load(); r != nil {
		return *r
	}
	row := make([]float32, 4*p.n)
	for i := 0; i < p.n; i++ {
		a1, a2 := p.axesOf(b, i, sideEast, false)
		row[4*i], row[4*i+1] = float32(a1), float32(a2)
		a1, a2 = p.axesOf(b, i, sideWest, false)
		row[4*i+2], row[4*i+3] = float32(a1), float32(a2)
	}
	p.ax.rows[b].CompareAndSwap(nil, &row)
	return *p.ax.rows[b].Load()
}

// slewTo is the time (s) to move from the previous pointing, where it is
// at from, to the axis positions c1, c2.
func (p *Problem) slewTo(prev prevState, from, c1, c2 float64) float64 {
	a1, a2 := p.axes(prev.block, from, prev.side, true)
	return p.Site.Overheads.slewSeconds(p.Site.Mount, a1, a2, c1, c2)
}

// AxisSeconds is the time (s) one axis needs to travel d degrees from rest
// to rest: a trapezoidal speed profile that accelerates at accel (deg/s^2)
// up to rate (deg/s), cruises, and decelerates at accel, or a triangle when
// the move is too short to reach the rate (d < rate^2/accel):
//
//	t = d/rate + rate/accel   (d >= rate^2/accel)
//	t = 2 sqrt(d/accel)       (otherwise)
//
// accel = 0 means the rate is reached at once (t = d/rate). Kinematics of
// constant acceleration, no published source needed.
func AxisSeconds(d, rate, accel float64) float64 {
	d = math.Abs(d)
	if d == 0 || !(rate > 0) {
		return 0
	}
	if !(accel > 0) || d >= rate*rate/accel {
		t := d / rate
		if accel > 0 {
			t += rate / accel
		}
		return t
	}
	return 2 * math.Sqrt(d/accel)
}

// slewSeconds is the slew between two axis positions (degrees): both axes
// move at once, the slower one wins; german equatorial axes do not wrap
// (the counterweight must stay down), the other mounts take the shorter
// way round on axis 1.
func (o *Overheads) slewSeconds(mount constraints.MountKind, a1, a2, c1, c2 float64) float64 {
	d1 := math.Abs(c1 - a1)
	if mount != constraints.GermanEquatorial {
		d1 = math.Abs(math.Remainder(c1-a1, 360))
	}
	d2 := math.Abs(c2 - a2)
	return math.Max(AxisSeconds(d1, o.Axis1RateDegS, o.Axis1AccelDegS2), AxisSeconds(d2, o.Axis2RateDegS, o.Axis2AccelDegS2))
}

// SlewTime is the time the site's mount needs to move from one pointing to
// another (the same model as the planner's: mechanical axes of the mount
// kind, pier sides of a german mount, trapezoidal profiles, slower axis
// wins). from.PierWest and to.PierWest give the sides.
func (s *Site) SlewTime(from, to Pointing) time.Duration {
	side := func(west bool) int8 {
		if west && s.Mount == constraints.GermanEquatorial {
			return sideWest
		}
		return sideEast
	}
	a1, a2 := mountAxes(s.Site, from.HADeg, from.DecDeg, from.AzDeg, from.AltDeg, side(from.PierWest), false)
	c1, c2 := mountAxes(s.Site, to.HADeg, to.DecDeg, to.AzDeg, to.AltDeg, side(to.PierWest), false)
	return secs(s.Overheads.slewSeconds(s.Mount, a1, a2, c1, c2))
}

// focusPeriod is the periodic-focus period of x (seconds from the grid's
// start).
func (p *Problem) focusPeriod(x float64) int {
	if p.oh.focusEvery <= 0 {
		return 0
	}
	return int(math.Floor(x / p.oh.focusEvery))
}

// setup returns the overheads before a run of block b starting at x after
// prev (see Overheads).
func (p *Problem) setup(prev prevState, b int, x float64) setupParts {
	return p.setupFocus(prev, b, x, p.focusDue(prev, b, x))
}

// focusDue reports whether a run of block b starting at x after prev
// begins with a focus run (see Overheads.Focus).
func (p *Problem) focusDue(prev prevState, b int, x float64) bool {
	return p.oh.focus > 0 && (!prev.focused || prev.filter != p.bd[b].filter && p.oh.focusOnFilter ||
		p.oh.focusEvery > 0 && p.focusPeriod(prev.start) != p.focusPeriod(x))
}

// setupFocus is setup with the focus decision given (focusDue's): the
// exact solver tabulates the setup for both decisions.
func (p *Problem) setupFocus(prev prevState, b int, x float64, focus bool) setupParts {
	d := &p.bd[b]
	side := p.startSide(b, x)
	c1, c2 := p.axes(b, x, side, false)
	a1, a2 := p.axes(prev.block, x, prev.side, true)
	s := setupParts{slew: p.Site.Overheads.slewSeconds(p.Site.Mount, a1, a2, c1, c2), settle: p.oh.settle, acq: p.oh.acq}
	if prev.filter != d.filter {
		s.filter = p.oh.filter
	}
	if focus {
		s.doFocus = true
		s.focus = p.oh.focus
	}
	if prev.block >= 0 {
		// The mount leaves the previous target when the setup begins, not
		// at x: the slew from there, if longer, counts. On an equatorial
		// mount a fixed target was only turning in hour angle at the
		// sidereal rate, so its axis 1 was T seconds of it behind; taking
		// the larger of the two slews is then at least the true one (the
		// flip-limit stop of a german mount only shortens the drift).
		t := s.total()
		var s1 float64
		if p.Site.Mount != constraints.AltAzimuth && !p.bd[prev.block].moving {
			s1 = p.Site.Overheads.slewSeconds(p.Site.Mount, a1-siderealDegS*t, a2, c1, c2)
		} else {
			s1 = p.slewTo(prev, x-t, c1, c2)
		}
		if s1 > s.slew {
			s.slew = s1
		}
	}
	if math.IsNaN(s.slew) {
		// A pointing without a position (a track sample that is not a
		// number) can never be slewed to in time: every comparison with
		// the setup must fail, not succeed as NaN comparisons do.
		s.slew = math.Inf(1)
	}
	return s
}

// siderealDegS is the hour-angle rate of a fixed target, deg/s.
const siderealDegS = siderealRate * 180 / math.Pi

// after returns the state after a run of block b that started at s and
// ended on side.
func (p *Problem) after(b int, s float64, side int8) prevState {
	return prevState{block: b, side: side, start: s, filter: p.bd[b].filter, focused: true}
}
