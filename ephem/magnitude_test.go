package ephem

import (
	"math"
	"testing"
)

// orbitMagTol is the tolerance of the worked magnitudes, which are given to 1e-6
// mag.
const orbitMagTol = 1e-6

// TestCometMagnitude: m = M1 + 5 log10(Delta) + K1 log10(r). No worked
// comet-magnitude example from Meeus (the brief's ch. 33) could be verified
// from a source, so the cases are hand-derived, as stated beside each
// (log10 2 = 0.30103000).
func TestCometMagnitude(t *testing.T) {
	cases := []struct {
		m1, k1, delta, r, want float64
		why                    string
	}{
		// 5 + 5 log10 2 - 10 log10 2 = 5 - 1.5051500 = 3.4948500.
		{5, 10, 2, 0.5, 3.494850, "hand-derived"},
		// At Delta = r = 1 AU the magnitude is M1 whatever K1.
		{8.3, 12, 1, 1, 8.3, "definition of M1"},
		// K1 = 5 with r = Delta: M1 + 10 log10 4 = 11 + 6.0205999.
		{11, 5, 4, 4, 17.020600, "hand-derived"},
	}
	for _, tc := range cases {
		got := cometMagnitude(tc.m1, tc.k1, tc.delta, tc.r)
		if math.Abs(got-tc.want) > orbitMagTol {
			t.Errorf("M1=%g K1=%g Delta=%g r=%g: m = %.6f, want %.6f (%s; tol %g)", tc.m1, tc.k1, tc.delta, tc.r, got, tc.want, tc.why, orbitMagTol)
		}
	}
}

// TestHGMagnitude: the IAU H, G system (Bowell et al. 1989, Asteroids II,
// p. 524): V = H + 5 log10(r Delta) - 2.5 log10((1-G) Phi1 + G Phi2). No
// published worked example with all inputs could be verified from a
// source, so the cases are hand-derived from the formula, step by step:
//   - phase 0: Phi1 = Phi2 = 1, V = H + 5 log10(r Delta);
//     7 + 5 log10(3.75) = 7 + 2.8701563 = 9.8701563.
//   - phase 90 deg: tan 45 deg = 1, Phi1 = exp(-3.33) = 0.0357931,
//     Phi2 = exp(-1.87) = 0.1541237; with G = 0.15 the sum is
//     0.0304241 + 0.0231186 = 0.0535427, -2.5 log10 = 3.1782496.
//   - phase 60 deg, G = 0.25: tan 30 deg = 0.5773503, tan^0.63 = 0.7074680,
//     Phi1 = 0.0948111; tan^1.22 = 0.5116300, Phi2 = 0.3841400; sum
//     0.0711083 + 0.0960350 = 0.1671434, -2.5 log10 = 1.9422772; with
//     H = 10, 5 log10(1.2 * 0.4) = -1.5937938: V = 10.3484834.
func TestHGMagnitude(t *testing.T) {
	cases := []struct {
		h, g, r, delta, phaseDeg, want float64
	}{
		{7, 0.15, 2.5, 1.5, 0, 9.870156},
		{7, 0.15, 1, 1, 90, 10.178250},
		{10, 0.25, 1.2, 0.4, 60, 10.348483},
	}
	for _, tc := range cases {
		got := hgMagnitude(tc.h, tc.g, tc.r, tc.delta, tc.phaseDeg*Deg2Rad)
		if math.Abs(got-tc.want) > orbitMagTol {
			t.Errorf("H=%g G=%g r=%g Delta=%g phase=%g: V = %.6f, want %.6f (tol %g)",
				tc.h, tc.g, tc.r, tc.delta, tc.phaseDeg, got, tc.want, orbitMagTol)
		}
	}
	// Fainter with growing phase; brighter at phase for a larger G (the
	// slope parameter flattens the phase curve).
	prev := math.Inf(-1)
	for a := 0.0; a <= 150; a += 5 {
		m := hgMagnitude(5, 0.15, 1, 1, a*Deg2Rad)
		if m <= prev {
			t.Errorf("phase %g deg: V = %.6f not fainter than %.6f at %g deg", a, m, prev, a-5)
		}
		prev = m
	}
	if lo, hi := hgMagnitude(5, 0.05, 1, 1, 0.5), hgMagnitude(5, 0.5, 1, 1, 0.5); hi >= lo {
		t.Errorf("G = 0.5 gives %.4f, not brighter than G = 0.05 (%.4f) at 29 deg", hi, lo)
	}
	// At a phase of 180 deg no light reaches the observer: finite, faint.
	if m := hgMagnitude(5, 0.15, 1, 1, math.Pi); m != faintestMag {
		t.Errorf("phase 180 deg: V = %g, want %g", m, float64(faintestMag))
	}
}

// TestMagLawString names the laws.
func TestMagLawString(t *testing.T) {
	for l, want := range map[MagLaw]string{MagNone: "none", MagComet: "comet", MagAsteroid: "asteroid", 9: "MagLaw(?)"} {
		if got := l.String(); got != want {
			t.Errorf("MagLaw(%d).String() = %q, want %q", int(l), got, want)
		}
	}
}
