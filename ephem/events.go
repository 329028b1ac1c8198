package ephem

import (
	"math"
	"sort"
	"time"
)

// Event thresholds (geometric altitude of the centre, degrees). The Sun's
// -0.8333 deg is 34' of standard horizontal refraction plus its 16'
// semidiameter; twilights are defined on the centre at -6, -12 and -18 deg
// (Explanatory Supplement 3rd ed., sec. 15.4; US Naval Observatory usage).
const (
	SunriseAltDeg      = -0.8333
	CivilAltDeg        = -6.0
	NauticalAltDeg     = -12.0
	AstronomicalAltDeg = -18.0
	// moonHorizonDeg is the standard horizontal refraction, 34'; the Moon
	// rises when its upper limb, i.e. centre at -34' - semidiameter, does.
	moonHorizonDeg = -34.0 / 60
)

// EventKind names a rise, set or twilight crossing.
type EventKind int

// Event kinds. Dusk is the descending crossing, dawn the ascending one.
const (
	Sunset EventKind = iota
	Sunrise
	CivilDusk
	CivilDawn
	NauticalDusk
	NauticalDawn
	AstronomicalDusk
	AstronomicalDawn
	Moonrise
	Moonset
	numEventKinds
)

var eventNames = [...]string{"sunset", "sunrise", "civil_dusk", "civil_dawn", "nautical_dusk",
	"nautical_dawn", "astronomical_dusk", "astronomical_dawn", "moonrise", "moonset"}

// String returns the snake_case name used in JSON.
func (k EventKind) String() string {
	if k < 0 || k >= numEventKinds {
		return "unknown"
	}
	return eventNames[k]
}

// Event is one crossing.
type Event struct {
	Kind EventKind
	Time time.Time // UTC, to 1 s or better
}

// Night is the set of events in a window, the first of each kind; a kind
// that does not happen in the window has a zero Time and Has false.
type Night struct {
	Start, End time.Time
	Times      [numEventKinds]time.Time
	Has        [numEventKinds]bool
}

// Get returns the first event of a kind, and whether it happens.
func (n *Night) Get(k EventKind) (time.Time, bool) { return n.Times[k], n.Has[k] }

// NightWindow returns the 24 h window from local mean-solar noon of the
// civil date (noon UTC minus longitude/15 hours) to the next such noon.
func NightWindow(o *Observer, year int, month time.Month, day int) (start, end time.Time) {
	offset := time.Duration(o.LonRad * Rad2Deg / 15 * float64(time.Hour))
	start = time.Date(year, month, day, 12, 0, 0, 0, time.UTC).Add(-offset)
	return start, start.Add(24 * time.Hour)
}

// NightOf returns the Sun and Moon events of the night that begins on the
// given civil date (see NightWindow).
func NightOf(o *Observer, year int, month time.Month, day int) Night {
	start, end := NightWindow(o, year, month, day)
	return EventsBetween(o, start, end)
}

// EventsBetween finds the first event of each kind in [start, end).
func EventsBetween(o *Observer, start, end time.Time) Night {
	n := Night{Start: start, End: end}
	for _, e := range AllEvents(o, start, end) {
		if !n.Has[e.Kind] {
			n.Has[e.Kind] = true
			n.Times[e.Kind] = e.Time
		}
	}
	return n
}

// AllEvents returns every Sun and Moon event in [start, end), in time order.
//
// Method: the altitude (minus the threshold's moving part, for the Moon) is
// sampled every 20 minutes; its extrema are located from the samples and
// refined by golden-section search; between consecutive extrema the curve
// is monotonic, so each threshold is crossed there at most once and the
// crossing is bracketed and solved by bisection to 0.05 s. Grazing passes
// (an extremum a hair above or below a threshold), polar day and polar
// night therefore come out right: a crossing is reported only where the
// refined curve really changes sign. Two extrema closer than one sample
// step would be missed; the Sun's and Moon's altitude extrema are hours
// apart at any latitude this service accepts.
func AllEvents(o *Observer, start, end time.Time) []Event {
	var out []Event
	sun := func(t float64) float64 {
		s := prepareSun(NewInstant(unixToTime(t)))
		l := s.Local(o)
		alt, _ := l.HorizontalOfDate(l.SunOfDate())
		return alt * Rad2Deg
	}
	sunThr := []struct {
		alt      float64
		down, up EventKind
	}{
		{SunriseAltDeg, Sunset, Sunrise},
		{CivilAltDeg, CivilDusk, CivilDawn},
		{NauticalAltDeg, NauticalDusk, NauticalDawn},
		{AstronomicalAltDeg, AstronomicalDusk, AstronomicalDawn},
	}
	t0, t1 := timeToUnix(start), timeToUnix(end)
	segs := monotonicSegments(sun, t0, t1)
	for _, th := range sunThr {
		for _, c := range segs.crossings(sun, th.alt) {
			k := th.down
			if c.rising {
				k = th.up
			}
			out = append(out, Event{k, unixToTime(c.t)})
		}
	}
	moon := func(t float64) float64 {
		s := prepareSun(NewInstant(unixToTime(t)))
		s.addMoon()
		l := s.Local(o)
		m := l.MoonOfDate()
		alt, _ := l.HorizontalOfDate(m)
		// Upper limb: centre altitude plus semidiameter.
		return (alt + MoonSemidiameter(m.Norm())) * Rad2Deg
	}
	for _, c := range monotonicSegments(moon, t0, t1).crossings(moon, moonHorizonDeg) {
		k := Moonset
		if c.rising {
			k = Moonrise
		}
		out = append(out, Event{k, unixToTime(c.t)})
	}
	sort.Slice(out, func(i, j int) bool { return out[i].Time.Before(out[j].Time) })
	return out
}

const (
	eventSampleStep = 20 * 60.0 // s
	eventTolerance  = 0.05      // s
)

// segments holds the boundaries of intervals on which f is monotonic, with
// f's value at each boundary.
type segments struct {
	t, f []float64
}

// monotonicSegments samples f on [t0, t1] and returns the boundaries: the
// ends and every refined extremum.
func monotonicSegments(f func(float64) float64, t0, t1 float64) segments {
	n := int(math.Ceil((t1-t0)/eventSampleStep)) + 1
	ts := make([]float64, n)
	fs := make([]float64, n)
	for i := range ts {
		ts[i] = math.Min(t0+float64(i)*eventSampleStep, t1)
		fs[i] = f(ts[i])
	}
	s := segments{t: []float64{t0}, f: []float64{fs[0]}}
	for i := 1; i+1 < n; i++ {
		d1, d2 := fs[i]-fs[i-1], fs[i+1]-fs[i]
		if d1 > 0 && d2 <= 0 || d1 < 0 && d2 >= 0 {
			tm := goldenExtremum(f, ts[i-1], ts[i+1], d1 > 0)
			s.t = append(s.t, tm)
			s.f = append(s.f, f(tm))
		}
	}
	s.t = append(s.t, t1)
	s.f = append(s.f, fs[n-1])
	return s
}

// goldenExtremum locates a maximum (or minimum) of f in [a, b] by
// golden-section search to 1 s (Press et al., Numerical Recipes 3rd ed.
// sec. 10.2).
func goldenExtremum(f func(float64) float64, a, b float64, max bool) float64 {
	const r = 0.6180339887498949
	g := func(t float64) float64 {
		if max {
			return -f(t)
		}
		return f(t)
	}
	c, d := b-r*(b-a), a+r*(b-a)
	fc, fd := g(c), g(d)
	for b-a > 1 {
		if fc < fd {
			b, d, fd = d, c, fc
			c = b - r*(b-a)
			fc = g(c)
		} else {
			a, c, fc = c, d, fd
			d = a + r*(b-a)
			fd = g(d)
		}
	}
	return (a + b) / 2
}

type crossing struct {
	t      float64
	rising bool
}

// crossings returns, for each monotonic segment whose ends lie on opposite
// sides of thr, the crossing solved by bisection.
func (s segments) crossings(f func(float64) float64, thr float64) []crossing {
	var out []crossing
	for i := 0; i+1 < len(s.t); i++ {
		a, b := s.t[i], s.t[i+1]
		fa, fb := s.f[i]-thr, s.f[i+1]-thr
		if fa == 0 || (fa < 0) == (fb < 0) {
			continue
		}
		rising := fb > fa
		for b-a > eventTolerance {
			m := (a + b) / 2
			fm := f(m) - thr
			if (fm < 0) == (fa < 0) {
				a, fa = m, fm
			} else {
				b = m
			}
		}
		out = append(out, crossing{(a + b) / 2, rising})
	}
	return out
}

func timeToUnix(t time.Time) float64 { return float64(t.Unix()) + float64(t.Nanosecond())*1e-9 }

func unixToTime(s float64) time.Time {
	sec := math.Floor(s)
	return time.Unix(int64(sec), int64(math.Round((s-sec)*1e9))).UTC()
}
