package ephem

import (
	"errors"
	"math"
	"testing"
	"time"
)

// Bounds of FuzzEvents: windows start within the years 1900..2200 (the
// instants the service accepts) and last up to 48 h.
var (
	fuzzEventsFirst = time.Date(1900, 1, 1, 0, 0, 0, 0, time.UTC).Unix()
	fuzzEventsLast  = time.Date(2200, 12, 31, 0, 0, 0, 0, time.UTC).Unix()
)

const (
	fuzzEventsMaxHours = 48.0
	// fuzzEventsProbe is the step of the brute-force scan that every
	// crossing AllEvents reports must agree with.
	fuzzEventsProbe = 10 * time.Minute
	// fuzzEventsAltTolDeg bounds the altitude error at a reported event:
	// the bisection stops at 0.05 s (eventTolerance) and neither body's
	// altitude changes faster than 360 deg a day (0.0042 deg/s).
	fuzzEventsAltTolDeg = 1e-3
)

// fuzzCurve is one threshold of one body, as AllEvents defines it.
type fuzzCurve struct {
	name     string
	f        func(t time.Time) float64 // degrees
	thr      float64
	down, up EventKind
}

func fuzzCurves(o *Observer) []fuzzCurve {
	sun := func(t time.Time) float64 {
		s := prepareSun(NewInstant(t))
		l := s.Local(o)
		alt, _ := l.HorizontalOfDate(l.SunOfDate())
		return alt * Rad2Deg
	}
	moon := func(t time.Time) float64 {
		s := prepareSun(NewInstant(t))
		s.addMoon()
		l := s.Local(o)
		m := l.MoonOfDate()
		alt, _ := l.HorizontalOfDate(m)
		return (alt + MoonSemidiameter(m.Norm())) * Rad2Deg
	}
	return []fuzzCurve{
		{"Sun at -0.8333", sun, SunriseAltDeg, Sunset, Sunrise},
		{"Sun at -6", sun, CivilAltDeg, CivilDusk, CivilDawn},
		{"Sun at -12", sun, NauticalAltDeg, NauticalDusk, NauticalDawn},
		{"Sun at -18", sun, AstronomicalAltDeg, AstronomicalDusk, AstronomicalDawn},
		{"Moon's upper limb at -34'", moon, moonHorizonDeg, Moonset, Moonrise},
	}
}

// FuzzEvents: for any observer and any window of up to 48 h, NewObserver
// refuses the observer with the sentinel an independent classification
// predicts, or AllEvents returns, in time order and inside [start, end):
//
//   - for each threshold, crossings that alternate between descending and
//     ascending, the first leaving the side the curve starts on and the
//     last reaching the side it ends on;
//   - at each crossing the curve within 0.001 deg of the threshold;
//   - a crossing in every 10-minute interval of a brute-force scan across
//     which the curve changes side (the converse need not hold: a grazing
//     pass can cross twice between two probes);
//   - no more crossings of a threshold than 2 per day plus 2.
//
// The curves are AllEvents' own (the Sun's centre, the Moon's upper limb,
// geometric altitude of date), so this checks the search (sampling,
// extremum refinement, bisection), not the ephemeris, which
// events_test.go compares with a reference table.
func FuzzEvents(f *testing.F) {
	f.Add(41.6, -4.2, 900.0, int64(1931342400), 24.0)    // 2031-03-15 12:00 UTC, 41.6 N
	f.Add(69.65, 18.96, 10.0, int64(1781913600), 48.0)   // 2026-06-20, midnight sun
	f.Add(-77.85, 166.67, 20.0, int64(1781913600), 30.0) // 2026-06-20, polar night
	f.Add(66.4, 25.7, 0.0, int64(1797724800), 24.0)      // 2026-12-20 near the Arctic circle
	f.Add(0.0, 180.0, -500.0, int64(-2208988800), 1.0)   // 1900-01-01 at the date line
	f.Add(90.0, 360.0, 10000.0, int64(7271164800), 12.0) // 2200-06-01 at the pole
	f.Add(91.0, 0.0, 0.0, int64(0), 24.0)                // refused
	f.Add(45.0, -200.0, 0.0, int64(0), 24.0)             // refused
	f.Fuzz(func(t *testing.T, latDeg, lonDeg, heightM float64, startS int64, hours float64) {
		var want error
		switch {
		case !(latDeg >= -90 && latDeg <= 90):
			want = ErrLatitude
		case !(lonDeg >= -180 && lonDeg <= 360):
			want = ErrLongitude
		case !(heightM >= -500 && heightM <= 10000):
			want = ErrElevation
		}
		o, err := NewObserver(latDeg, lonDeg, heightM)
		if want != nil || err != nil {
			if !errors.Is(err, want) {
				t.Fatalf("NewObserver(%v, %v, %v) = %v, want %v", latDeg, lonDeg, heightM, err, want)
			}
			return
		}
		h := math.Mod(math.Abs(hours), fuzzEventsMaxHours)
		if math.IsNaN(h) {
			return
		}
		h = math.Max(h, 0.01)
		if startS < fuzzEventsFirst || startS > fuzzEventsLast {
			span := fuzzEventsLast - fuzzEventsFirst
			startS = fuzzEventsFirst + ((startS%span)+span)%span
		}
		start := time.Unix(startS, 0).UTC()
		end := start.Add(time.Duration(h * float64(time.Hour)))

		events := AllEvents(&o, start, end)
		for i, e := range events {
			if e.Time.Before(start) || !e.Time.Before(end) {
				t.Fatalf("event %v at %v outside [%v, %v)", e.Kind, e.Time, start, end)
			}
			if i > 0 && e.Time.Before(events[i-1].Time) {
				t.Fatalf("events out of order: %v then %v", events[i-1], e)
			}
		}
		maxPer := 2*int(math.Ceil(h/24)) + 2
		for _, c := range fuzzCurves(&o) {
			var got []Event
			for _, e := range events {
				if e.Kind == c.down || e.Kind == c.up {
					got = append(got, e)
				}
			}
			if len(got) > maxPer {
				t.Fatalf("%s: %d crossings in %.2f h", c.name, len(got), h)
			}
			f0, f1 := c.f(start)-c.thr, c.f(end)-c.thr
			for i, e := range got {
				if i > 0 && e.Kind == got[i-1].Kind {
					t.Fatalf("%s: two %v in a row (%v, %v)", c.name, e.Kind, got[i-1].Time, e.Time)
				}
				if d := c.f(e.Time) - c.thr; math.Abs(d) > fuzzEventsAltTolDeg {
					t.Fatalf("%s: %v at %v is %.5f deg off the threshold", c.name, e.Kind, e.Time, d)
				}
			}
			if len(got) > 0 {
				if first := got[0].Kind; (f0 > 0 && first != c.down) || (f0 < 0 && first != c.up) {
					t.Fatalf("%s: starts %+.4f deg from the threshold, first crossing %v", c.name, f0, first)
				}
				if last := got[len(got)-1].Kind; (f1 > fuzzEventsAltTolDeg && last != c.up) || (f1 < -fuzzEventsAltTolDeg && last != c.down) {
					t.Fatalf("%s: ends %+.4f deg from the threshold, last crossing %v", c.name, f1, last)
				}
			} else if (f0 > 0) != (f1 > 0) && math.Abs(f0) > fuzzEventsAltTolDeg && math.Abs(f1) > fuzzEventsAltTolDeg {
				t.Fatalf("%s: from %+.4f to %+.4f deg over the window with no crossing", c.name, f0, f1)
			}
			// Brute force: each change of side between probes holds a
			// crossing in that direction.
			prevT, prev := start, f0
			for tp := start.Add(fuzzEventsProbe); ; tp = tp.Add(fuzzEventsProbe) {
				if tp.After(end) {
					tp = end
				}
				cur := c.f(tp) - c.thr
				if (prev > 0) != (cur > 0) && math.Abs(prev) > fuzzEventsAltTolDeg && math.Abs(cur) > fuzzEventsAltTolDeg {
					kind := c.up
					if prev > 0 {
						kind = c.down
					}
					found := false
					for _, e := range got {
						if e.Kind == kind && !e.Time.Before(prevT.Add(-time.Second)) && !e.Time.After(tp.Add(time.Second)) {
							found = true
						}
					}
					if !found {
						t.Fatalf("%s: %+.4f deg at %v, %+.4f deg at %v, but no %v between (events %v)", c.name, prev, prevT, cur, tp, kind, got)
					}
				}
				if !tp.Before(end) {
					break
				}
				prevT, prev = tp, cur
			}
		}
	})
}
