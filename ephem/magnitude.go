package ephem

import "math"

// MagLaw says which brightness law an Orbit uses.
type MagLaw int

// Brightness laws.
const (
	// MagNone: no magnitude is predicted (View.Magnitude is NaN).
	MagNone MagLaw = iota
	// MagComet: total magnitude m = M1 + 5 log10(Delta) + K1 log10(r), the
	// usual law for comets (e.g. Meeus, Astronomical Algorithms, 2nd ed.;
	// the chapter, 33, from memory).
	MagComet
	// MagAsteroid: the IAU H, G system of Bowell et al. (1989).
	MagAsteroid
)

// String returns the law's name.
func (l MagLaw) String() string {
	switch l {
	case MagNone:
		return "none"
	case MagComet:
		return "comet"
	case MagAsteroid:
		return "asteroid"
	}
	return "MagLaw(?)"
}

// faintestMag is what the laws return when the light reaching the observer
// underflows (an H, G phase function of zero near a phase angle of 180 deg):
// a finite "invisible" value instead of +Inf.
const faintestMag = 99

// cometMagnitude returns the total magnitude m = M1 + 5 log10(Delta) +
// K1 log10(r) of a comet at distance deltaAU from the observer and rAU from
// the Sun (see MagComet).
func cometMagnitude(m1, k1, deltaAU, rAU float64) float64 {
	return m1 + 5*math.Log10(deltaAU) + k1*math.Log10(rAU)
}

// hgMagnitude returns the apparent magnitude of a minor planet in the IAU
// two-parameter system (Bowell et al. 1989, "Application of photometric
// models to asteroids", in Asteroids II, p. 524):
//
//	V = H + 5 log10(r Delta) - 2.5 log10((1-G) Phi1 + G Phi2),
//	Phi1 = exp(-3.33 tan^0.63(a/2)),  Phi2 = exp(-1.87 tan^1.22(a/2)),
//
// with a the phase angle (radians). The law is fitted for phase angles below
// about 120 deg; beyond that the value is an extrapolation.
func hgMagnitude(h, g, rAU, deltaAU, phase float64) float64 {
	t := math.Tan(math.Abs(phase) / 2)
	phi1 := math.Exp(-3.33 * math.Pow(t, 0.63))
	phi2 := math.Exp(-1.87 * math.Pow(t, 1.22))
	m := h + 5*math.Log10(rAU*deltaAU) - 2.5*math.Log10((1-g)*phi1+g*phi2)
	if math.IsNaN(m) || m > faintestMag {
		// A phase function of zero or below (underflow at a phase near
		// 180 deg, or a G outside [0, 1] there) means no light.
		return faintestMag
	}
	return m
}

// magnitude applies c's brightness law; NaN for MagNone.
func (c *Conic) magnitude(rAU, deltaAU, phase float64) float64 {
	switch c.law {
	case MagComet:
		return cometMagnitude(c.m1, c.k1, deltaAU, rAU)
	case MagAsteroid:
		return hgMagnitude(c.h, c.g, rAU, deltaAU, phase)
	}
	return math.NaN()
}
