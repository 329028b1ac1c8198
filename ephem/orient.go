package ephem

import "math"

// Earth orientation: precession (IAU 2006), nutation (IAU 2000B), the Earth
// rotation angle and sidereal time. These are the equinox-based steps that
// take a GCRS direction to the true equator and equinox of date and then to
// the Greenwich meridian:
//
//	v_of_date = BiasPrecessionNutation(tt, dpsi, deps) * v_gcrs
//	GAST      = GMST06(ut1, tt) + EquationOfEquinoxes(tt, dpsi, MeanObliquity06(tt))
//
// The formulations follow the IERS Conventions (2003, ch. 5) and the SOFA
// routines named beside each function; tests compare against the SOFA test
// suite. Accuracy is set by IAU 2000B: about 1 mas in the pole between 1995
// and 2050 (McCarthy & Luzum 2003), far below the arcsecond-level needs of
// scheduling.

// Units of the nutation tables.
const (
	uas01ToRad = Arcsec2Rad / 1e7 // 0.1 microarcsecond
	uasToRad   = Arcsec2Rad / 1e6 // microarcsecond
	turnArcsec = 1296000.0        // arcseconds in a full circle
)

// Fixed offsets that IAU 2000B adds in lieu of the planetary nutation terms
// (Luzum 2001, as used by SOFA iauNut00b): -0.135 mas in longitude and
// +0.388 mas in obliquity. These are the values for the "rigorous" use, with
// frame bias, precession and nutation applied separately, as here; the
// -1.5835/+1.6339 mas of McCarthy & Luzum (2003) belong to their "total
// nutation" shortcut and would be wrong in this formulation.
const (
	nutPlanetaryDPsi = -0.135e-3 * Arcsec2Rad
	nutPlanetaryDEps = +0.388e-3 * Arcsec2Rad
)

// delaunay2000B returns the five Delaunay arguments l, l', F, D, Om
// (radians, reduced to one turn) at t Julian centuries of TT since J2000.0,
// in the linear form that IAU 2000B is defined with (Simon et al. 1994, A&A
// 282, 663, truncated to the rate, as in McCarthy & Luzum 2003 and SOFA
// iauNut00b).
func delaunay2000B(t float64) [5]float64 {
	return [5]float64{
		turnReduce(485868.249036+1717915923.2178*t) * Arcsec2Rad, // l, Moon's mean anomaly
		turnReduce(1287104.79305+129596581.0481*t) * Arcsec2Rad,  // l', Sun's mean anomaly
		turnReduce(335779.526232+1739527262.8478*t) * Arcsec2Rad, // F = L - Om
		turnReduce(1072260.70369+1602961601.2090*t) * Arcsec2Rad, // D, Moon's elongation
		turnReduce(450160.398036+(-6962890.5431)*t) * Arcsec2Rad, // Om, Moon's node
	}
}

// turnReduce reduces an angle in arcseconds to [0, 1296000) (give or take
// one rounding at the ends). x - floor(x/turn)*turn is exact here, since the
// product is an integer multiple of the turn below 2^53; it is several times
// faster than math.Mod, which only matters because the nutation runs inside
// event searches.
func turnReduce(x float64) float64 {
	return x - math.Floor(x*(1/turnArcsec))*turnArcsec
}

// maxMultiplier bounds |n| in the argument multipliers of both tables.
const maxMultiplier = 4

// argPowers holds cos(k a_j) and sin(k a_j) for the five Delaunay arguments
// a_j and k = -4..4 (index k+4), so that a term's argument sum_j n_j a_j
// needs only complex products instead of a sine and a cosine per term.
type argPowers struct {
	c, s [5][2*maxMultiplier + 1]float64
}

// fill builds the table from one Sincos per argument by repeated complex
// multiplication (error a few ulp for |k| <= 4).
func (p *argPowers) fill(a [5]float64) {
	const z = maxMultiplier
	for j := range a {
		s1, c1 := math.Sincos(a[j])
		p.c[j][z], p.s[j][z] = 1, 0
		c, s := 1.0, 0.0
		for k := 1; k <= maxMultiplier; k++ {
			c, s = c*c1-s*s1, c*s1+s*c1
			p.c[j][z+k], p.s[j][z+k] = c, s
			p.c[j][z-k], p.s[j][z-k] = c, -s
		}
	}
}

// at returns cos and sin of sum_j n_j a_j (unrolled: this is the inner
// loop of the nutation series).
func (p *argPowers) at(n *[5]int8) (c, s float64) {
	const z = maxMultiplier
	k0, k1, k2, k3, k4 := int(n[0])+z, int(n[1])+z, int(n[2])+z, int(n[3])+z, int(n[4])+z
	c, s = p.c[0][k0], p.s[0][k0]
	c1, s1 := p.c[1][k1], p.s[1][k1]
	c, s = c*c1-s*s1, c*s1+s*c1
	c2, s2 := p.c[2][k2], p.s[2][k2]
	c, s = c*c2-s*s2, c*s2+s*c2
	c3, s3 := p.c[3][k3], p.s[3][k3]
	c, s = c*c3-s*s3, c*s3+s*c3
	c4, s4 := p.c[4][k4], p.s[4][k4]
	return c*c4 - s*s4, c*s4 + s*c4
}

// Nutation2000B returns nutation in longitude and obliquity (radians),
// IAU 2000B (McCarthy & Luzum 2003, Celest. Mech. 85, 37; IERS Conventions
// 2003 ch. 5): 77 luni-solar terms plus the fixed planetary offsets. tt is
// TT (TDB gives the same result to far below the model's 1 mas). The
// nutation is with respect to the ecliptic and equinox of date, the
// equivalent of SOFA iauNut00b.
func Nutation2000B(tt JD) (dpsi, deps float64) {
	t := tt.Centuries()
	var p argPowers
	p.fill(delaunay2000B(t))
	var dp, de float64
	// Smallest terms first, to keep rounding of the large ones last.
	for i := len(nut2000B) - 1; i >= 0; i-- {
		x := &nut2000B[i]
		c, s := p.at(&x.n)
		dp += (x.a+x.at*t)*s + x.app*c
		de += (x.b+x.bt*t)*c + x.bpp*s
	}
	return dp*uas01ToRad + nutPlanetaryDPsi, de*uas01ToRad + nutPlanetaryDEps
}

// MeanObliquity06 returns the mean obliquity of the ecliptic of date, IAU
// 2006 (Hilton et al. 2006, Celest. Mech. Dyn. Astron. 94, 351; SOFA
// iauObl06), radians; tt is TT.
func MeanObliquity06(tt JD) float64 {
	t := tt.Centuries()
	return (84381.406 +
		(-46.836769+
			(-0.0001831+
				(0.00200340+
					(-0.000000576+
						(-0.0000000434)*t)*t)*t)*t)*t) * Arcsec2Rad
}

// PrecessionAngles06 returns the Fukushima-Williams angles gamma_bar,
// phi_bar, psi_bar, eps_A (IAU 2006, Capitaine et al. 2003/ Hilton 2006),
// frame bias included: the angles are measured from the GCRS pole and the
// J2000 ecliptic, so the matrix built from them takes GCRS vectors (not J2000
// mean-equator ones) to the mean equator and equinox of date. Radians; tt is
// TT. Coefficients as in SOFA iauPfw06; eps_A is MeanObliquity06.
func PrecessionAngles06(tt JD) (gamb, phib, psib, epsa float64) {
	t := tt.Centuries()
	gamb = (-0.052928 +
		(10.556378+
			(0.4932044+
				(-0.00031238+
					(-0.000002788+
						(0.0000000260)*t)*t)*t)*t)*t) * Arcsec2Rad
	phib = (84381.412819 +
		(-46.811016+
			(0.0511268+
				(0.00053289+
					(-0.000000440+
						(-0.0000000176)*t)*t)*t)*t)*t) * Arcsec2Rad
	psib = (-0.041775 +
		(5038.481484+
			(1.5584175+
				(-0.00018522+
					(-0.000026452+
						(-0.0000000148)*t)*t)*t)*t)*t) * Arcsec2Rad
	epsa = MeanObliquity06(tt)
	return gamb, phib, psib, epsa
}

// fukushimaWilliams returns R1(-eps) R3(-psi) R1(phi) R3(gam), the rotation
// from the GCRS to the equator and equinox given by the four angles
// (Fukushima 2003; SOFA iauFw2m).
func fukushimaWilliams(gam, phi, psi, eps float64) Mat3 {
	return RotX(-eps).Mul(RotZ(-psi)).Mul(RotX(phi)).Mul(RotZ(gam))
}

// BiasPrecessionNutation returns the matrix that rotates GCRS vectors to the
// true equator and equinox of date, given nutation (the equivalent of SOFA
// iauPnm06a / iauFw2m with the IAU 2006 angles and the supplied dpsi, deps).
// Nutation enters as psi_bar + dpsi and eps_A + deps (SOFA iauPn06). With
// dpsi = deps = 0 the result is the bias-precession matrix (SOFA iauPmat06).
// tt is TT; dpsi, deps in radians, normally from Nutation2000B.
func BiasPrecessionNutation(tt JD, dpsi, deps float64) Mat3 {
	gamb, phib, psib, epsa := PrecessionAngles06(tt)
	return fukushimaWilliams(gamb, phib, psib+dpsi, epsa+deps)
}

// EarthRotationAngle returns the ERA, IAU 2000 (Capitaine et al. 2000),
// radians in [0, 2pi): 2pi (0.7790572732640 + 1.00273781191135448 Du) with Du
// the UT1 days since J2000.0 (IERS Conventions 2003 ch. 5 eq. 14; SOFA
// iauEra00). As in SOFA, the whole days are dropped before scaling (the
// 1.0 Du part is the fractions of the two date parts) to keep precision;
// unlike SOFA the reduction to one turn is done in turns, before the
// multiplication by 2pi, which is exact and avoids math.Mod.
func EarthRotationAngle(ut1 JD) float64 {
	d1, d2 := ut1.Hi, ut1.Lo
	if d1 > d2 {
		d1, d2 = d2, d1
	}
	t := d1 + (d2 - J2000)
	f := (d1 - math.Trunc(d1)) + (d2 - math.Trunc(d2)) // fmod(d, 1) of each part
	turns := f + 0.7790572732640 + 0.00273781191135448*t
	return inTurn(2 * math.Pi * (turns - math.Floor(turns)))
}

// inTurn maps an angle that is at most a little outside [0, 2pi) into it
// (the rounding of 2pi*frac can give exactly 2pi), falling back to
// NormAngle for anything further out.
func inTurn(a float64) float64 {
	switch {
	case a >= 0 && a < 2*math.Pi:
		return a
	case a >= 2*math.Pi && a < 4*math.Pi:
		return a - 2*math.Pi
	case a < 0 && a >= -2*math.Pi:
		if a += 2 * math.Pi; a < 2*math.Pi {
			return a
		}
		return 0
	}
	return NormAngle(a)
}

// GMST06 returns Greenwich mean sidereal time, IAU 2006 (Capitaine et al.
// 2005), radians in [0, 2pi): the ERA plus the IAU 2006 polynomial in TT
// (Capitaine, Wallace & Chapront 2005, A&A 432, 355; SOFA iauGmst06). UT1
// drives the rotation, TT the precession part (using UT1 for both errs by
// about 0.1 mas).
func GMST06(ut1, tt JD) float64 {
	t := tt.Centuries()
	p := (0.014506 +
		(4612.156534+
			(1.3915817+
				(-0.00000044+
					(-0.000029956+
						(-0.0000000368)*t)*t)*t)*t)*t) * Arcsec2Rad
	return inTurn(EarthRotationAngle(ut1) + p)
}

// EquationOfEquinoxes returns GAST - GMST (radians): dpsi cos(epsA) plus the
// IAU 2000 complementary terms (the largest few of Capitaine et al. 2003 /
// SOFA iauEect00 are enough for 0.1 mas). epsA is the mean obliquity of date
// (MeanObliquity06), dpsi the nutation in longitude (Nutation2000B), tt is
// TT. The complementary terms (2.6 mas at most) are the 12 largest of the
// series of Capitaine, Wallace & McCarthy (2003) and its t^1 term; the omitted
// ones total under 5 uas. Their arguments use the linear Delaunay arguments
// of IAU 2000B, which differ from the full polynomials of SOFA iauEect00 by
// up to 32 arcsec (l, in 1900 and 2100) and 7.5 arcsec (Om), changing the
// terms by at most 0.1 uas.
func EquationOfEquinoxes(tt JD, dpsi, epsA float64) float64 {
	t := tt.Centuries()
	var p argPowers
	p.fill(delaunay2000B(t))
	var ct float64
	for i := len(eqeqComplementary) - 1; i >= 0; i-- {
		x := &eqeqComplementary[i]
		c, s := p.at(&x.n)
		ct += x.s*s + x.c*c
	}
	ct += eqeqComplementaryT * t * p.s[4][maxMultiplier+1]
	return dpsi*math.Cos(epsA) + ct*uasToRad
}
