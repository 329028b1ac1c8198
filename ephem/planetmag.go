package ephem

import "math"

// Planetary visual magnitudes of Mallama & Hilton (2018), "Computing
// apparent planetary magnitudes for The Astronomical Almanac", Astronomy and
// Computing 25, 10 (equation numbers below are theirs), with phase effects.
// Each law is V = V(1, alpha) + 5 log10(r Delta), alpha the phase angle in
// degrees, r and Delta in AU.
//
// Notes, as in the paper's "geocentric" laws:
//   - Mars: the corrections for the central meridian and for the orbital
//     longitude (the paper's Stirling-interpolated tables, up to about
//     +-0.06 mag) are not applied.
//   - Saturn: globe and rings (eq. 10) with the sub-Earth and sub-Sun
//     saturnicentric latitudes; the paper bounds it to alpha <= 6.5 deg and
//     a ring opening <= 27 deg, which the Earth never leaves.
//   - Neptune: the secular brightening of eq. 16 and the phase term of
//     eq. 17, applied at every date (the paper states eq. 17 for after 2000).
//
// The pole directions of Saturn and Uranus are the IAU WGCCRE 2015 values
// (Archinal et al. 2018, Celest. Mech. Dyn. Astr. 130:22) at J2000; their
// precession, about 0.01 deg per decade, changes the magnitudes by under
// 1e-4 mag. From memory: Saturn RA 40.589 deg, Dec 83.537 deg; Uranus RA
// 257.311 deg, Dec -15.175 deg.
var (
	saturnPole = SphericalToVec(40.589*Deg2Rad, 83.537*Deg2Rad)
	uranusPole = SphericalToVec(257.311*Deg2Rad, -15.175*Deg2Rad)
)

// planetMagnitude returns the visual magnitude of planet b with
// heliocentric position helio (Sun -> planet at emission) and d (observer
// -> planet), both GCRS axes, AU, at tt.
func planetMagnitude(b Body, helio, d Vec3, tt JD) float64 {
	r, delta := helio.Norm(), d.Norm()
	a := Separation(helio, d) * Rad2Deg
	dist := 5 * math.Log10(r*delta)
	switch b {
	case Mercury: // eq. 2
		return -0.613 + dist + a*(6.3280e-02+a*(-1.6336e-03+a*(3.3644e-05+a*(-3.4265e-07+a*(1.6893e-09+a*-3.0334e-12)))))
	case Venus: // eqs. 3 and 4
		if a < 163.7 {
			return -4.384 + dist + a*(-1.044e-03+a*(3.687e-04+a*(-2.814e-06+a*8.938e-09)))
		}
		return 236.05828 + dist + a*(-2.81914+a*8.39034e-03)
	case Mars: // eqs. 6 and 7
		if a <= 50 {
			return -1.601 + dist + a*(2.267e-02+a*-1.302e-04)
		}
		return -0.367 + dist + a*(-0.02573+a*0.0003445)
	case Jupiter: // eqs. 8 and 9
		if a <= 12 {
			return -9.395 + dist + a*(-3.7e-04+a*6.16e-04)
		}
		x := a / 180
		return -9.428 + dist - 2.5*math.Log10(1+x*(-1.507+x*(-0.363+x*(-0.062+x*(2.809+x*-1.876)))))
	case Saturn: // eq. 10
		// The geometric mean of the two latitudes, zero when they differ in
		// sign (the rings' lit and seen faces differ).
		lat := 0.0
		if prod := subLatitude(saturnPole, helio) * subLatitude(saturnPole, d); prod > 0 {
			lat = math.Sqrt(prod)
		}
		s := math.Sin(lat * Deg2Rad)
		return -8.914 + dist - 1.825*s + 0.026*a - 0.378*s*math.Exp(-2.25*a)
	case Uranus: // eq. 14
		lat := (math.Abs(subLatitude(uranusPole, helio)) + math.Abs(subLatitude(uranusPole, d))) / 2
		m := -7.110 + dist - 0.00084*lat
		if a > 3.1 {
			m += a * (6.587e-3 + a*1.045e-4)
		}
		return m
	case Neptune: // eqs. 16 and 17
		year := 2000 + tt.DaysSinceJ2000()/365.25
		m := math.Min(math.Max(-6.89-0.0054*(year-1980), -7.00), -6.89) + dist
		if a > 1.9 {
			m += a * (7.944e-3 + a*9.617e-5)
		}
		return m
	}
	return math.NaN()
}

// subLatitude returns the planetocentric latitude (degrees) of the point
// where the line of sight v (toward the planet) meets it, for a pole
// direction pole: 90 deg minus the angle between the pole and v.
func subLatitude(pole, v Vec3) float64 {
	return Separation(pole, v)*Rad2Deg - 90
}

// moonMagnitude returns the Moon's visual magnitude at phase angle phase
// (radians), distance rAU from the Sun and deltaAU from the observer:
// V = -12.73 + 0.026 |a| + 4e-9 a^4 (a in degrees) at the mean distances
// (Allen's Astrophysical Quantities, 4th ed., the lunar phase law; from
// memory), scaled to the actual distances by 5 log10(r Delta / (1 AU x
// 384400 km)). The law ignores the opposition surge and the maria; expect
// about 0.1-0.2 mag.
func moonMagnitude(phase, rAU, deltaAU float64) float64 {
	a := math.Abs(phase) * Rad2Deg
	return -12.73 + 0.026*a + 4e-9*a*a*a*a + 5*math.Log10(rAU*deltaAU*AUKm/384400)
}
