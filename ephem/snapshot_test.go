package ephem

import (
	"math"
	"testing"
	"time"
)

// Meeus, Astronomical Algorithms 2nd ed., Example 48.a: 1992 April 12, 0h TD,
// phase angle i = 69.0756 deg, illuminated fraction k = (1 + cos i)/2 =
// 0.6786 (values as reproduced by the soniakeys/meeus test suite).
func TestMoonIlluminationMeeus48a(t *testing.T) {
	tt := JD{2448724.5, 0}
	in := NewInstant(UTCFromTT(tt))
	s := Prepare(in)
	k, limb := s.MoonIllumination()
	const kTol = 2e-4 // Meeus prints four decimals
	if math.Abs(k-0.6786) > kTol {
		t.Errorf("illuminated fraction %.5f, want 0.6786 +- %v", k, kTol)
	}
	// The bright limb faces the Sun: for a waxing Moon east of the Sun,
	// toward the west, position angle about 285 deg (Meeus: chi = 285.0 deg,
	// Example 48.a, from memory).
	if d := math.Abs(limb*Rad2Deg - 285.0); d > 1 {
		t.Errorf("bright limb position angle %.2f deg, want about 285.0", limb*Rad2Deg)
	}
}

// Snapshot.OfDate and ApparentOfDate are rotations: lengths are kept and the
// apparent direction differs from the astrometric one by at most the
// aberration plus precession since J2000.
func TestApparentOfDateIsUnit(t *testing.T) {
	s := Prepare(NewInstant(time.Date(2026, 12, 1, 0, 0, 0, 0, time.UTC)))
	v := SphericalToVec(1, 0.3)
	a := s.ApparentOfDate(v)
	if math.Abs(a.Norm()-1) > 1e-15 {
		t.Errorf("|apparent| = %v", a.Norm())
	}
	if d := Separation(a, s.OfDate(v)) * Rad2Arcsec; d > 20.6 {
		t.Errorf("aberration %.2f arcsec, more than the 20.5 arcsec constant", d)
	}
}

// TestBetween checks Between (interpolation between two snapshots, the
// Earth's rotation computed at the instant) against Prepare at the instant
// (the full computation: IAU 2006/2000B, VSOP87, ELP-2000/82), for spans of
// 60 s and 120 s of UTC at instants from 1990 to 2049, leap seconds
// included.
func TestBetween(t *testing.T) {
	const (
		sunTolArcsec  = 1e-3
		moonTolArcsec = 5e-3
		gastTolRad    = 1e-10
		npbTol        = 1e-12
		earthTolAU    = 1e-10
	)
	worstSun, worstMoon, worstGAST := 0.0, 0.0, 0.0
	t0 := time.Date(1990, 1, 1, 0, 0, 0, 0, time.UTC)
	for k := 0; k < 400; k++ {
		// Deterministic spread: 59 years, every hour of the day.
		at := t0.Add(time.Duration(k) * (59 * 365 * 24 * time.Hour / 400)).Add(time.Duration(k*37) * time.Minute)
		if k == 7 { // across the leap second at the end of 2016
			at = time.Date(2016, 12, 31, 23, 59, 30, 0, time.UTC)
		}
		for _, span := range []time.Duration{time.Minute, 2 * time.Minute} {
			a, b := Prepare(NewInstant(at)), Prepare(NewInstant(at.Add(span)))
			for _, frac := range []float64{0.13, 0.5, 0.87} {
				pt := at.Add(time.Duration(frac * float64(span)))
				want := Prepare(NewInstant(pt))
				got := Between(&a, &b, NewInstant(pt))
				worstSun = math.Max(worstSun, Separation(got.SunOfDate, want.SunOfDate)*Rad2Deg*3600)
				worstMoon = math.Max(worstMoon, Separation(got.MoonOfDate, want.MoonOfDate)*Rad2Deg*3600)
				worstGAST = math.Max(worstGAST, math.Abs(math.Remainder(got.GAST-want.GAST, 2*math.Pi)))
				for i := range got.NPB {
					for j := range got.NPB[i] {
						if d := math.Abs(got.NPB[i][j] - want.NPB[i][j]); d > npbTol {
							t.Fatalf("%v: NPB[%d][%d] off by %g, tolerance %g", pt, i, j, d, npbTol)
						}
					}
				}
				if d := got.EarthPos.Sub(want.EarthPos).Norm(); d > earthTolAU {
					t.Fatalf("%v: Earth position off by %g AU, tolerance %g", pt, d, earthTolAU)
				}
				if d := math.Abs(got.MoonOfDate.Norm()/want.MoonOfDate.Norm() - 1); d > 3e-8 { // 10 m
					t.Fatalf("%v: Moon distance off by %g (relative), tolerance 3e-8", pt, d)
				}
			}
		}
	}
	if worstSun > sunTolArcsec || worstMoon > moonTolArcsec || worstGAST > gastTolRad {
		t.Errorf("Between vs Prepare: Sun %.2g arcsec (tolerance %g), Moon %.2g arcsec (%g), GAST %.2g rad (%g)",
			worstSun, sunTolArcsec, worstMoon, moonTolArcsec, worstGAST, gastTolRad)
	}
	t.Logf("worst: Sun %.2g arcsec, Moon %.2g arcsec, GAST %.2g rad", worstSun, worstMoon, worstGAST)
}
