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
