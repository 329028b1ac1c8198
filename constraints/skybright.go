package constraints

// The sky-brightness model: V-band surface brightness of the sky at a
// target, the sum in flux of three parts.
//
//  1. Dark sky (airglow, zodiacal light, unresolved stars, any light
//     pollution): the site's zenith brightness brightened toward the horizon
//     as in Krisciunas & Schaefer (1991, PASP 103, 1033), eq. 2.
//  2. Moonlight scattered by the atmosphere: Krisciunas & Schaefer (1991),
//     eq. 15 with their I* (phase law) and f(rho) (scattering function).
//  3. Twilight: the zenith V brightness fitted by Patat, Ugolnikov &
//     Postylyakov (2006, A&A 455, 385) as a function of the Sun's zenith
//     distance, spread over the sky by an extension of our own (see
//     TwilightNanolamberts).
//
// Fluxes are in nanolamberts (nL) and are converted to mag/arcsec^2 once, at
// the end, with Krisciunas & Schaefer's eq. 1.
//
// Speed: everything that depends only on the instant (Sun, Moon, site) is
// folded into a SkyStep by NewSkyStep; SkyStep.At then costs one sine, one
// square root, one exponential and one logarithm per target, plus a table
// look-up of f(rho) for each of the Moon (when it is up) and twilight (when
// the Sun is above -18 deg).
//
// Sources of the constants. The formulas of Krisciunas & Schaefer (1991) are
// those quoted in the issue and were checked, constant by constant, against
// the published implementation in specsim (desihub/specsim, function
// atmosphere.krisciunas_schaefer, whose comments cite the paper's equation
// numbers); its documented worked example (19.855 mag/arcsec^2) is a test in
// skybright_test.go. The paper's own Table 2 could not be consulted. The
// Patat et al. (2006) V coefficients (11.84, 1.518, -0.057, valid for Sun
// zenith distances 95-105 deg) were taken from two independent public
// transcriptions of the paper's fit table that agree digit for digit; the
// paper's table itself could not be read here.

import "math"

// SkyParams are a site's sky: dark zenith brightness and V extinction.
type SkyParams struct {
	// ZenithMag is the dark (moonless, Sun below -18 deg) sky at the
	// zenith, V mag/arcsec^2. The site default of 21.6 is common practice
	// for a dark rural site, with no published source.
	ZenithMag float64
	// ExtinctionV is the V extinction coefficient k, mag per airmass.
	ExtinctionV float64
}

// Constants of Krisciunas & Schaefer (1991, PASP 103, 1033).
const (
	// Eq. 1: B[nL] = 34.08 exp(20.7233 - 0.92104 V).
	ksNLScale  = 34.08
	ksNLOffset = 20.7233
	ksNLSlope  = 0.92104
	// Eq. 3: X = (1 - 0.96 sin^2 Z)^(-1/2), finite (5.0) at the horizon.
	ksAirmassCoeff = 0.96
	// I* = 10^(-0.4 (3.84 + 0.026 |alpha| + 4e-9 alpha^4)), alpha the
	// phase angle in degrees: the Moon's illuminance outside the atmosphere,
	// their eq. 8, I* = 10^(-0.4 (m + 16.57)), with the Moon's V magnitude
	// of eq. 9, m = -12.73 + 0.026 |alpha| + 4e-9 alpha^4 (3.84 = 16.57 -
	// 12.73), in the units that make eq. 15 come out in nL.
	ksIStar0 = 3.84
	ksIStar1 = 0.026
	ksIStar4 = 4e-9
	// Eq. 21: f(rho) = 10^5.36 (1.06 + cos^2 rho) + 10^(6.15 - rho/40),
	// rho in degrees; Rayleigh plus aerosol (Mie) scattering.
	ksRayleighLog10 = 5.36
	ksRayleighConst = 1.06
	ksMieLog10      = 6.15
	ksMieScaleDeg   = 40.0
	// ksMinSepDeg is where the fit of f(rho) stops: Krisciunas & Schaefer
	// fitted rho >= ~10 deg. Closer separations are evaluated at 10 deg;
	// a block's minimum Moon separation rejects such pointings anyway.
	ksMinSepDeg = 10.0
	// ksMeanMoonDistKm is the distance at which I* holds. I* is scaled by
	// (384400 km / d)^2 for the Moon's actual distance d (our addition; the
	// paper uses the mean distance).
	ksMeanMoonDistKm = 384400.0
)

// Constants of the twilight model.
const (
	// Patat, Ugolnikov & Postylyakov (2006, A&A 455, 385), V band, zenith:
	// m(z) = a0 + a1 (z - 95) + a2 (z - 95)^2, z the Sun's zenith distance
	// in degrees, fitted for 95 <= z <= 105 (ESO-Paranal, 2635 m). The
	// measured brightness includes the night sky.
	patatA0     = 11.84
	patatA1     = 1.518
	patatA2     = -0.057
	patatZLoDeg = 95.0
	patatZHiDeg = 105.0
	// patatNightMag is the Paranal dark V zenith sky that the fit contains
	// and that is subtracted to leave scattered sunlight only: 21.6, the
	// zenith-corrected V average of Patat (2003, A&A 400, 1183).
	patatNightMag = 21.6
	// twilightEndZDeg: no twilight once the Sun is 18 deg below the
	// horizon (astronomical twilight ends).
	twilightEndZDeg = 108.0
	// twilightDayZDeg: the Sun above the horizon is treated as on it; the
	// model does not describe daylight and only needs to say "far too
	// bright" (V ~ 4.3 mag/arcsec^2 at the zenith).
	twilightDayZDeg = 90.0
)

const (
	skyDeg  = math.Pi / 180
	skyLn10 = math.Ln10
)

var (
	ksRayleigh = math.Pow(10, ksRayleighLog10)
	ksMie      = math.Pow(10, ksMieLog10)
	// ksMieRate converts rho in radians to the exponent of e in the Mie
	// term: 10^(-rho_deg/40) = exp(-ksMieRate * rho_rad).
	ksMieRate     = skyLn10 / ksMieScaleDeg / skyDeg
	ksMinSep      = ksMinSepDeg * skyDeg
	patatNightNL  = MagToNanolamberts(patatNightMag)
	twilightAt105 = patatExcessNL(patatZHiDeg)
	ksScatterTab  = newScatterTable()
	// ksMagAt1NL is 0.92104 times the V of 1 nL: 20.7233 + ln 34.08.
	ksMagAt1NL = ksNLOffset + math.Log(ksNLScale)
)

// The fast path reads f(rho) from a table every 0.1 deg from 10 to 180 deg
// with linear interpolation: a cosine and an exponential become two loads.
// The interpolation error, h^2/8 times the second derivative of f, is
// largest where the Mie term dominates (rho = 10 deg): (0.1 ln10/40)^2 / 8
// = 4e-6 of f, i.e. 4e-6 mag (TestScatterTable bounds it).
const (
	ksTabStep = 0.1 * skyDeg
	ksTabLen  = 1701 // (180 - 10) / 0.1 + 1
)

func newScatterTable() *[ksTabLen]float64 {
	var t [ksTabLen]float64
	for i := range t {
		t[i] = ksScatter(ksMinSep + float64(i)*ksTabStep)
	}
	return &t
}

// ksScatterFast is ksScatter interpolated in ksScatterTab.
func ksScatterFast(rho float64) float64 {
	u := (rho - ksMinSep) * (1 / ksTabStep)
	if !(u > 0) { // also NaN
		return ksScatterTab[0]
	}
	if u >= ksTabLen-1 {
		return ksScatterTab[ksTabLen-1]
	}
	i := int(u)
	a, b := ksScatterTab[i], ksScatterTab[i+1]
	return a + (u-float64(i))*(b-a)
}

// MagToNanolamberts converts V mag/arcsec^2 to nanolamberts (Krisciunas &
// Schaefer 1991, eq. 1, after Garstang 1986, PASP 98, 364, eq. 19):
// B = 34.08 exp(20.7233 - 0.92104 V).
func MagToNanolamberts(v float64) float64 {
	return ksNLScale * math.Exp(ksNLOffset-ksNLSlope*v)
}

// NanolambertsToMag converts nanolamberts to V mag/arcsec^2, the inverse of
// MagToNanolamberts. b must be positive.
func NanolambertsToMag(b float64) float64 {
	// (20.7233 - ln(b / 34.08)) / 0.92104, with the constants folded.
	return (ksMagAt1NL - math.Log(b)) * (1 / ksNLSlope)
}

// ksAirmass is Krisciunas & Schaefer's eq. 3 for an altitude in radians
// (negative altitudes count as 0): X = (1 - 0.96 cos^2 alt)^(-1/2).
func ksAirmass(alt float64) float64 {
	s := math.Sin(math.Max(alt, 0))
	return 1 / math.Sqrt(1-ksAirmassCoeff+ksAirmassCoeff*s*s)
}

// ksScatter is Krisciunas & Schaefer's scattering function f(rho), eq. 21,
// for a separation in radians, evaluated at no less than 10 deg.
func ksScatter(rho float64) float64 {
	rho = math.Max(rho, ksMinSep)
	c := math.Cos(rho)
	return ksRayleigh*(ksRayleighConst+c*c) + ksMie*math.Exp(-ksMieRate*rho)
}

// ksIStar is the Moon's illuminance outside the atmosphere for a phase
// angle in radians (0 = full) at distance distKm (<= 0 means the mean).
func ksIStar(phase, distKm float64) float64 {
	a := math.Abs(phase) / skyDeg
	a2 := a * a
	i := math.Pow(10, -0.4*(ksIStar0+ksIStar1*a+ksIStar4*a2*a2))
	if distKm > 0 {
		r := ksMeanMoonDistKm / distKm
		i *= r * r
	}
	return i
}

// DarkSkyNanolamberts is the dark sky at altitude alt (radians; below the
// horizon counts as 0) for a zenith brightness zenithMag (V mag/arcsec^2)
// and extinction k (mag/airmass), Krisciunas & Schaefer (1991) eq. 2:
//
//	B = B_zen X 10^(-0.4 k (X - 1)),  X from eq. 3.
//
// The factor X is the longer emitting path through the airglow layer,
// 10^(-0.4 k) the extinction of that light relative to the zenith.
func DarkSkyNanolamberts(zenithMag, k, alt float64) float64 {
	x := ksAirmass(alt)
	return MagToNanolamberts(zenithMag) * x * math.Pow(10, -0.4*k*(x-1))
}

// MoonlightNanolamberts is the moonlight scattered toward a target at
// altitude alt, moonSep from the Moon (radians), with the Moon at altitude
// moonAlt, phase angle moonPhase (Sun-Moon-observer, radians, 0 = full) and
// distance moonDistKm (<= 0 means the mean distance), for extinction k
// (mag/airmass). Krisciunas & Schaefer (1991) eq. 15:
//
//	B_moon = f(rho) I* 10^(-0.4 k X_moon) [1 - 10^(-0.4 k X)]
//
// with I* = 10^(-0.4 (3.84 + 0.026 |alpha| + 4e-9 alpha^4)) (alpha in
// degrees) times (384400 km / d)^2 (the distance factor is ours), f(rho) =
// 10^5.36 (1.06 + cos^2 rho) + 10^(6.15 - rho/40) (rho in degrees, at least
// 10), X and X_moon from eq. 3. Zero when the Moon is below the horizon.
//
// f has its minimum near rho = 95 deg: the Rayleigh term brightens the sky
// opposite the Moon again, as in the paper.
func MoonlightNanolamberts(k, alt, moonAlt, moonSep, moonPhase, moonDistKm float64) float64 {
	if moonAlt < 0 {
		return 0
	}
	xm := ksAirmass(moonAlt)
	x := ksAirmass(alt)
	return ksScatter(moonSep) * ksIStar(moonPhase, moonDistKm) *
		math.Pow(10, -0.4*k*xm) * (1 - math.Pow(10, -0.4*k*x))
}

// patatZenithMag is the Patat et al. (2006) zenith V twilight fit at Sun
// zenith distance z (degrees), 95 <= z <= 105; below 95 deg (Sun above
// -5 deg) it continues along its tangent at 95 deg, down to z = 90.
func patatZenithMag(z float64) float64 {
	d := math.Max(z, twilightDayZDeg) - patatZLoDeg
	if d < 0 {
		return patatA0 + patatA1*d
	}
	return patatA0 + (patatA1+patatA2*d)*d
}

// patatExcessNL is the scattered sunlight at the zenith, nL, for Sun zenith
// distance z <= 105 deg: the Patat et al. fit less the Paranal night sky.
func patatExcessNL(z float64) float64 {
	return MagToNanolamberts(patatZenithMag(z)) - patatNightNL
}

// twilightZenithNL is the twilight at the zenith, nL, for Sun geometric
// altitude sunAlt (radians):
//
//   - Sun below -18 deg (z >= 108): 0.
//   - -18 < h <= -15 (105 <= z < 108): the excess at 105 deg falls
//     linearly in flux to 0 at 108 deg (our extension: the fit is not
//     meant beyond 105 deg and reaches the Paranal night level at 105.85).
//   - -15 < h <= -5: Patat et al. (2006) less the night sky (Patat 2003).
//   - h > -5: the fit's tangent at 95 deg; the Sun above the horizon counts
//     as on it (V ~ 4.25 at the zenith, finite).
//
// It is continuous in sunAlt and never increases as the Sun sinks.
func twilightZenithNL(sunAlt float64) float64 {
	z := 90 - sunAlt/skyDeg
	switch {
	case z >= twilightEndZDeg:
		return 0
	case z >= patatZHiDeg:
		return twilightAt105 * (twilightEndZDeg - z) / (twilightEndZDeg - patatZHiDeg)
	}
	return patatExcessNL(z)
}

// TwilightNanolamberts is the twilight at a target at altitude alt, sunSep
// from the Sun (radians), with the Sun at geometric altitude sunAlt
// (radians), for extinction k (mag/airmass):
//
//	B_twi = B_zen(h) * [f(sunSep) / f(z_sun)] * [(1 - 10^(-0.4 k X)) / (1 - 10^(-0.4 k))]
//
// B_zen(h) is the zenith twilight from Patat, Ugolnikov & Postylyakov (2006)
// (see twilightZenithNL for its ends). The two brackets are our extension
// away from the zenith, borrowed from Krisciunas & Schaefer (1991): their
// scattering function f (which their abstract says they also compared with
// Russian measurements of sunlit skies) for the angle to the Sun,
// normalised to the zenith, where sunSep equals
// the Sun's zenith distance z_sun; and their single-scattering path term
// for the airmass X (eq. 3), normalised to X = 1 (the limit X for k = 0).
// Both are 1 at the zenith, so the zenith value is Patat's. The extension
// makes the low sky toward the Sun several magnitudes brighter than the
// zenith, but it ignores the Earth's shadow opposite the Sun: treat it as a
// rough guide, good for ranking pointings, not for photometry. Patat's
// site is high (2635 m); a low site's twilight is brighter (about 30 % in V
// by their comparison), which is not modelled.
func TwilightNanolamberts(k, alt, sunAlt, sunSep float64) float64 {
	zen := twilightZenithNL(sunAlt)
	if zen == 0 {
		return 0
	}
	zSun := math.Pi/2 - sunAlt
	return zen * ksScatter(sunSep) / ksScatter(zSun) * ksPathRatio(k, ksAirmass(alt))
}

// ksPathRatio is (1 - 10^(-0.4 k X)) / (1 - 10^(-0.4 k)), X for k = 0.
func ksPathRatio(k, x float64) float64 {
	g1 := 1 - math.Pow(10, -0.4*k)
	if g1 <= 0 {
		return x
	}
	return (1 - math.Pow(10, -0.4*k*x)) / g1
}

// SkyStep holds what the sky model needs at one instant, computed once per
// time step by NewSkyStep.
type SkyStep struct {
	extRate  float64 // 0.4 ln(10) k: 10^(-0.4 k X) = exp(-extRate X)
	darkC    float64 // B_zen 10^(0.4 k), nL
	moonC    float64 // I* 10^(-0.4 k X_moon), 0 when the Moon is down
	twiC     float64 // B_zen,twi / f(z_sun) / (1 - 10^(-0.4 k)), 0 when dark
	twiNoExt bool    // k = 0: the twilight path term is X itself
}

// NewSkyStep folds the instant's Sun and Moon into a SkyStep: sunAlt is the
// Sun's geometric altitude, moonAlt the Moon's (apparent or geometric)
// altitude, moonPhase its phase angle (Sun-Moon-observer, 0 = full), all in
// radians, and moonDistKm its distance (<= 0 means the mean distance).
// sunAz and moonAz are accepted for the grid's convenience but not used:
// SkyStep.At takes the separations directly.
func NewSkyStep(p SkyParams, sunAlt, sunAz, moonAlt, moonAz, moonPhase, moonDistKm float64) SkyStep {
	k := p.ExtinctionV
	s := SkyStep{
		extRate: 0.4 * skyLn10 * k,
		darkC:   MagToNanolamberts(p.ZenithMag) * math.Pow(10, 0.4*k),
	}
	if moonAlt >= 0 {
		s.moonC = ksIStar(moonPhase, moonDistKm) * math.Pow(10, -0.4*k*ksAirmass(moonAlt))
	}
	if zen := twilightZenithNL(sunAlt); zen > 0 {
		g1 := 1 - math.Pow(10, -0.4*k)
		s.twiC = zen / ksScatter(math.Pi/2-sunAlt)
		if g1 > 0 {
			s.twiC /= g1
		} else {
			s.twiNoExt = true
		}
	}
	return s
}

// At returns the V sky brightness in mag/arcsec^2 at a target of apparent
// altitude alt and azimuth az, at angular distance moonSep from the Moon and
// sunSep from the Sun (all radians). Targets below the horizon get the value
// at alt = 0. az is not used (the separations carry the geometry).
//
// At equals NanolambertsToMag of the sum of DarkSkyNanolamberts,
// MoonlightNanolamberts and TwilightNanolamberts for the same inputs, to
// 1e-5 mag (f(rho) comes from a table here).
func (s *SkyStep) At(alt, az, moonSep, sunSep float64) float64 {
	if alt < 0 {
		alt = 0
	}
	return s.atSin(math.Sin(alt), moonSep, sunSep, false)
}

// atSin is At for a target whose apparent altitude has the sine sa >= 0
// (the grid has it already). fast takes e^x and ln x from expFast and
// logFast (1e-8 mag, for the grid's float32 values) instead of package
// math (At's 1e-12).
func (s *SkyStep) atSin(sa, moonSep, sunSep float64, fast bool) float64 {
	x := 1 / math.Sqrt(1-ksAirmassCoeff+ksAirmassCoeff*sa*sa)
	var t float64 // 10^(-0.4 k X)
	if fast {
		t = expFast(-s.extRate * x)
	} else {
		t = math.Exp(-s.extRate * x)
	}
	b := s.darkC * x * t
	if s.moonC != 0 {
		b += s.moonC * ksScatterFast(moonSep) * (1 - t)
	}
	if s.twiC != 0 {
		path := 1 - t
		if s.twiNoExt {
			path = x
		}
		b += s.twiC * ksScatterFast(sunSep) * path
	}
	if fast {
		return (ksMagAt1NL - logFast(b)) * (1 / ksNLSlope) // NanolambertsToMag
	}
	return NanolambertsToMag(b)
}
