package ephem

import (
	"math"
	"testing"
	"time"
)

// Tolerances in physical units.
const (
	microsecond = 1e-6 // s
)

// Leap seconds: IERS Bulletin C (TAI-UTC = 36 s from 2015-07-01, 37 s from
// 2017-01-01), so TT-UTC = 68.184 s and 69.184 s.
func TestTTMinusUTC(t *testing.T) {
	cases := []struct {
		utc  time.Time
		want float64
	}{
		{time.Date(2016, 12, 31, 23, 59, 59, 0, time.UTC), 68.184},
		{time.Date(2017, 1, 1, 0, 0, 0, 0, time.UTC), 69.184},
		{time.Date(2026, 12, 1, 0, 0, 0, 0, time.UTC), 69.184},
		{time.Date(1972, 1, 1, 0, 0, 0, 0, time.UTC), 42.184},
		{time.Date(1999, 1, 1, 0, 0, 0, 0, time.UTC), 64.184},
	}
	for _, c := range cases {
		in := NewInstant(c.utc)
		if math.Abs(in.TTMinusUTC-c.want) > microsecond {
			t.Errorf("%v: TT-UTC = %.6f s, want %.6f s", c.utc, in.TTMinusUTC, c.want)
		}
		got := (in.TT.DaysSinceJ2000() - JDFromLabel(c.utc).DaysSinceJ2000()) * 86400
		if math.Abs(got-c.want) > 10*microsecond {
			t.Errorf("%v: TT from JD differs from UTC by %.6f s, want %.6f s", c.utc, got, c.want)
		}
	}
}

// J2000.0 is 2000-01-01T12:00:00 TT = 11:58:55.816 UTC (IERS; Explanatory
// Supplement 3rd ed. sec. 3.5).
func TestJ2000Epoch(t *testing.T) {
	utc := time.Date(2000, 1, 1, 11, 58, 55, 816000000, time.UTC)
	in := NewInstant(utc)
	if d := in.TT.DaysSinceJ2000() * 86400; math.Abs(d) > 10*microsecond {
		t.Errorf("TT at %v is %.6f s from J2000, want 0", utc, d)
	}
	back := UTCFromTT(in.TT)
	if d := back.Sub(utc); d > time.Microsecond || d < -time.Microsecond {
		t.Errorf("UTCFromTT round trip off by %v", d)
	}
}

// Delta T from Espenak & Meeus (2006): their polynomial values at the start
// of each range, which they list beside the tabulated values (from memory,
// to the printed precision of the polynomials' constant terms).
func TestDeltaT(t *testing.T) {
	cases := []struct{ year, want, tol float64 }{
		{1900, -2.79, 0.01},
		{1950, 29.07, 0.01},
		{1975, 45.45, 0.01},
		{2000, 63.86, 0.01},
		{1820, 12.0, 0.5}, // 1820 tabulated ~12.0 s (from memory)
	}
	for _, c := range cases {
		if got := DeltaT(c.year); math.Abs(got-c.want) > c.tol {
			t.Errorf("DeltaT(%v) = %.3f s, want %.3f +- %.2f s", c.year, got, c.want, c.tol)
		}
	}
	// Continuity at range boundaries (the published pieces join to < 1 s).
	for _, y := range []float64{1600, 1700, 1800, 1860, 1900, 1920, 1941, 1961, 1986, 2005, 2050, 2150} {
		if d := DeltaT(y-1e-6) - DeltaT(y); math.Abs(d) > 1.5 {
			t.Errorf("DeltaT jumps by %.2f s at %v", d, y)
		}
	}
}

// Before 1972 the time.Time is UT and TT = UT + Delta T.
func TestInstantBefore1972(t *testing.T) {
	utc := time.Date(1950, 6, 15, 0, 0, 0, 0, time.UTC)
	in := NewInstant(utc)
	if math.Abs(in.TTMinusUTC-DeltaT(1950+5.5/12)) > microsecond {
		t.Errorf("TT-UT in 1950 = %v, want Delta T %v", in.TTMinusUTC, DeltaT(1950+5.5/12))
	}
}

func TestDUT1Range(t *testing.T) {
	if _, err := NewInstantDUT1(time.Now(), 1.2); err != ErrDUT1 {
		t.Errorf("DUT1 1.2 s: err = %v, want ErrDUT1", err)
	}
	in, err := NewInstantDUT1(time.Date(2024, 3, 1, 0, 0, 0, 0, time.UTC), 0.5)
	if err != nil {
		t.Fatal(err)
	}
	if d := (in.UT1.DaysSinceJ2000() - JDFromLabel(in.UTC).DaysSinceJ2000()) * 86400; math.Abs(d-0.5) > 10*microsecond {
		t.Errorf("UT1-UTC = %v s, want 0.5", d)
	}
}
