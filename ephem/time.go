package ephem

import (
	"errors"
	"math"
	"time"
)

// JD is a two-part Julian date: the date is Hi+Lo days. Keeping the whole
// days and the fraction apart keeps about 20 microseconds of precision that a
// single float64 Julian date would lose (the SOFA convention of d1+d2).
type JD struct {
	Hi, Lo float64
}

// Julian date constants.
const (
	J2000          = 2451545.0 // JD of 2000 January 1.5 TT
	DaysPerCentury = 36525.0
	unixEpochJD    = 2440587.5 // JD of 1970-01-01T00:00:00 UTC
	// TTMinusTAI is TT - TAI in seconds, exact by definition (IAU 1991).
	TTMinusTAI = 32.184
)

// Value returns the Julian date as one float64 (less precise than Hi+Lo).
func (j JD) Value() float64 { return j.Hi + j.Lo }

// DaysSinceJ2000 returns the days elapsed since J2000.0 in j's time scale.
func (j JD) DaysSinceJ2000() float64 { return (j.Hi - J2000) + j.Lo }

// Centuries returns Julian centuries since J2000.0 in j's time scale.
func (j JD) Centuries() float64 { return j.DaysSinceJ2000() / DaysPerCentury }

// AddDays returns j shifted by d days.
func (j JD) AddDays(d float64) JD { return JD{j.Hi, j.Lo + d} }

// JDFromLabel returns the Julian date whose calendar reading is t's clock
// reading, with no time-scale conversion: use it for instants labelled in TT
// (such as a perihelion time), never for UTC instants.
func JDFromLabel(t time.Time) JD {
	t = t.UTC()
	sec := t.Unix()
	days := math.Floor(float64(sec) / 86400)
	rem := float64(sec) - days*86400 + float64(t.Nanosecond())*1e-9
	return JD{unixEpochJD + days, rem / 86400}
}

// LabelFromJD is the inverse of JDFromLabel: the clock reading of j as a
// time.Time in the UTC location (no time-scale conversion).
func LabelFromJD(j JD) time.Time {
	d := j.Hi - unixEpochJD
	whole := math.Floor(d)
	frac := (d - whole) + j.Lo
	ns := math.Round(frac * 86400e9)
	return time.Unix(int64(whole)*86400, 0).UTC().Add(time.Duration(ns))
}

// leapSecond is one step of TAI-UTC, in force from Start (UTC).
type leapSecond struct {
	start  time.Time
	offset float64 // TAI-UTC, seconds
}

// leapTable is TAI-UTC since 1972, from IERS Bulletin C (the IERS
// "Leap_Second.dat" list). No leap second has been announced after
// 2017-01-01 as of Bulletin C 72 (from memory; IERS announces each one about
// six months ahead). The last value is kept for all later instants.
var leapTable = func() []leapSecond {
	type e struct {
		y, m int
		s    float64
	}
	es := []e{
		{1972, 1, 10}, {1972, 7, 11}, {1973, 1, 12}, {1974, 1, 13}, {1975, 1, 14},
		{1976, 1, 15}, {1977, 1, 16}, {1978, 1, 17}, {1979, 1, 18}, {1980, 1, 19},
		{1981, 7, 20}, {1982, 7, 21}, {1983, 7, 22}, {1985, 7, 23}, {1988, 1, 24},
		{1990, 1, 25}, {1991, 1, 26}, {1992, 7, 27}, {1993, 7, 28}, {1994, 7, 29},
		{1996, 1, 30}, {1997, 7, 31}, {1999, 1, 32}, {2006, 1, 33}, {2009, 1, 34},
		{2012, 7, 35}, {2015, 7, 36}, {2017, 1, 37},
	}
	out := make([]leapSecond, len(es))
	for i, x := range es {
		out[i] = leapSecond{time.Date(x.y, time.Month(x.m), 1, 0, 0, 0, 0, time.UTC), x.s}
	}
	return out
}()

// LeapSeconds returns TAI-UTC in seconds at UTC instant t, and false for
// instants before 1972-01-01, when UTC had no whole-second steps and the
// table does not apply.
func LeapSeconds(t time.Time) (float64, bool) {
	if t.Before(leapTable[0].start) {
		return 0, false
	}
	off := leapTable[0].offset
	for _, l := range leapTable {
		if t.Before(l.start) {
			break
		}
		off = l.offset
	}
	return off, true
}

// DeltaT returns TT-UT1 in seconds for a decimal year, from the polynomial
// expressions of Espenak & Meeus, "Five Millennium Canon of Solar Eclipses"
// (NASA TP-2006-214141, 2006), section "Polynomial expressions for Delta T".
// nightloom uses it only outside the leap-second table (before 1972).
func DeltaT(year float64) float64 {
	y := year
	switch {
	case y < -500:
		u := (y - 1820) / 100
		return -20 + 32*u*u
	case y < 500:
		u := y / 100
		return poly(u, 10583.6, -1014.41, 33.78311, -5.952053, -0.1798452, 0.022174192, 0.0090316521)
	case y < 1600:
		u := (y - 1000) / 100
		return poly(u, 1574.2, -556.01, 71.23472, 0.319781, -0.8503463, -0.005050998, 0.0083572073)
	case y < 1700:
		t := y - 1600
		return poly(t, 120, -0.9808, -0.01532, 1.0/7129)
	case y < 1800:
		t := y - 1700
		return poly(t, 8.83, 0.1603, -0.0059285, 0.00013336, -1.0/1174000)
	case y < 1860:
		t := y - 1800
		return poly(t, 13.72, -0.332447, 0.0068612, 0.0041116, -0.00037436, 0.0000121272, -0.0000001699, 0.000000000875)
	case y < 1900:
		t := y - 1860
		return poly(t, 7.62, 0.5737, -0.251754, 0.01680668, -0.0004473624, 1.0/233174)
	case y < 1920:
		t := y - 1900
		return poly(t, -2.79, 1.494119, -0.0598939, 0.0061966, -0.000197)
	case y < 1941:
		t := y - 1920
		return poly(t, 21.20, 0.84493, -0.076100, 0.0020936)
	case y < 1961:
		t := y - 1950
		return poly(t, 29.07, 0.407, -1.0/233, 1.0/2547)
	case y < 1986:
		t := y - 1975
		return poly(t, 45.45, 1.067, -1.0/260, -1.0/718)
	case y < 2005:
		t := y - 2000
		return poly(t, 63.86, 0.3345, -0.060374, 0.0017275, 0.000651814, 0.00002373599)
	case y < 2050:
		t := y - 2000
		return poly(t, 62.92, 0.32217, 0.005589)
	case y < 2150:
		u := (y - 1820) / 100
		return -20 + 32*u*u - 0.5628*(2150-y)
	default:
		u := (y - 1820) / 100
		return -20 + 32*u*u
	}
}

// poly evaluates c[0] + c[1] x + c[2] x^2 + ... by Horner's rule.
func poly(x float64, c ...float64) float64 {
	r := 0.0
	for i := len(c) - 1; i >= 0; i-- {
		r = r*x + c[i]
	}
	return r
}

// decimalYear returns the year as y + (month - 0.5)/12, the argument
// convention of Espenak & Meeus.
func decimalYear(t time.Time) float64 {
	return float64(t.Year()) + (float64(t.Month())-0.5)/12
}

// Instant is one moment in the time scales the ephemeris needs. Build it with
// NewInstant; the zero value is not useful.
type Instant struct {
	UTC time.Time
	TT  JD // Terrestrial Time; used also as TDB (they differ by < 2 ms)
	UT1 JD // Universal Time, for the Earth's rotation
	// TTMinusUTC is TT-UTC in seconds (leap seconds + 32.184 s, or Delta T
	// before 1972).
	TTMinusUTC float64
}

// ErrDUT1 reports a DUT1 outside the +-0.9 s that UTC keeps it within.
var ErrDUT1 = errors.New("ephem: DUT1 must be within +-0.9 s")

// NewInstant converts a UTC instant, taking UT1 = UTC (DUT1 = 0, good to 0.9 s
// of time, 14 arcsec of Earth rotation at most).
func NewInstant(t time.Time) Instant {
	in, _ := NewInstantDUT1(t, 0)
	return in
}

// NewInstantDUT1 converts a UTC instant with UT1 = UTC + dut1 seconds.
// Methods: TT = UTC + (TAI-UTC) + 32.184 s from the leap-second table
// (IERS Bulletin C) from 1972 on; before 1972 t is taken as UT1 and
// TT = UT1 + Delta T (Espenak & Meeus 2006).
func NewInstantDUT1(t time.Time, dut1 float64) (Instant, error) {
	if math.IsNaN(dut1) || math.Abs(dut1) > 0.9 {
		return Instant{}, ErrDUT1
	}
	t = t.UTC()
	utc := JDFromLabel(t)
	var in Instant
	in.UTC = t
	if ls, ok := LeapSeconds(t); ok {
		in.TTMinusUTC = ls + TTMinusTAI
		in.UT1 = utc.AddDays(dut1 / 86400)
	} else {
		in.TTMinusUTC = DeltaT(decimalYear(t))
		in.UT1 = utc
	}
	in.TT = utc.AddDays(in.TTMinusUTC / 86400)
	return in, nil
}

// UTCFromTT returns the UTC instant whose TT is j, inverting NewInstant to
// well under a microsecond (two fixed-point passes absorb a leap-second step).
func UTCFromTT(j JD) time.Time {
	label := LabelFromJD(j)
	t := label
	for i := 0; i < 3; i++ {
		in := NewInstant(t)
		t = label.Add(-time.Duration(math.Round(in.TTMinusUTC * 1e9)))
	}
	return t
}
