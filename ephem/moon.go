package ephem

import "math"

// moonMeanDistanceKm is the constant term of the Moon's distance in Meeus
// chapter 47 (km).
const moonMeanDistanceKm = 385000.56

// moonArg returns c0 + c1 T + c2 T^2 + ... (degrees) reduced to [0, 360) and
// converted to radians; reducing in degrees first keeps the precision of the
// large linear terms (x - 360 floor(x/360) loses under 1e-10 deg here and is
// much faster than math.Mod).
func moonArg(t float64, c ...float64) float64 {
	x := poly(t, c...)
	return (x - 360*math.Floor(x/360)) * Deg2Rad
}

// MoonEclipticOfDate returns the Moon's geocentric ecliptic longitude and
// latitude (radians, mean ecliptic and mean equinox of date, without
// nutation) and the distance between the centres of the Earth and the Moon
// (km) at TT.
//
// Method: Meeus, Astronomical Algorithms, 2nd ed. (1998), chapter 47, the
// ELP-2000/82 theory truncated to the 60 + 60 terms of tables 47.A and 47.B,
// with the eccentricity factor E on the terms in M and Meeus's additive
// terms in A1, A2, A3 and L'. Meeus quotes about 10 arcsec in longitude and
// 4 arcsec in latitude (from memory); ERFA, which codes the same model
// (eraMoon98), reports 18 arcsec and 32 km at worst against ELP/MPP02 over
// 1950-2100.
//
// Note: Meeus's mean longitude L' (218.3164477 deg at J2000) includes the
// light-time, 0.74 arcsec, which ERFA's moon98 leaves out; the longitude is
// thus where the Moon is seen rather than strictly its geometric place, a
// difference far below the model's accuracy.
func MoonEclipticOfDate(tt JD) (lon, lat, distKm float64) {
	t := tt.Centuries()

	// Fundamental arguments, Meeus eq. 47.1-47.5, and 47.6 (E).
	lp := moonArg(t, 218.3164477, 481267.88123421, -0.0015786, 1.0/538841, -1.0/65194000)
	d := moonArg(t, 297.8501921, 445267.1114034, -0.0018819, 1.0/545868, -1.0/113065000)
	m := moonArg(t, 357.5291092, 35999.0502909, -0.0001536, 1.0/24490000)
	mp := moonArg(t, 134.9633964, 477198.8675055, 0.0087414, 1.0/69699, -1.0/14712000)
	f := moonArg(t, 93.2720950, 483202.0175233, -0.0036539, -1.0/3526000, 1.0/863310000)
	a1 := moonArg(t, 119.75, 131.849)
	a2 := moonArg(t, 53.09, 479264.290)
	a3 := moonArg(t, 313.45, 481266.484)
	e := poly(t, 1, -0.002516, -0.0000074)

	// Every argument is dD + mM + m'M' + fF with small integers, so
	// exp(i arg) is a product of powers of exp(iD), exp(iM), exp(iM'),
	// exp(iF). Two tables make each term one complex product:
	// dm[5d + m+2] = E^|m| exp(i(dD + mM))    (d 0..4, m -2..2; E folded in)
	// pf[7(m'+3) + f+3] = exp(i(m'M' + fF))   (m' -3..4, f -3..3)
	var ed [5]complex128  // exp(i k D), k = 0..4
	var em [5]complex128  // E^|k| exp(i k M), k = -2..2 at [k+2]
	var emp [8]complex128 // exp(i k M'), k = -3..4 at [k+3]
	var ef [7]complex128  // exp(i k F), k = -3..3 at [k+3]
	ed[0], em[2], emp[3], ef[3] = 1, 1, 1, 1
	ed[1], em[3], emp[4], ef[4] = moonCis(d), complex(e, 0)*moonCis(m), moonCis(mp), moonCis(f)
	for k := 2; k <= 4; k++ {
		ed[k] = ed[k-1] * ed[1]
		emp[k+3] = emp[k+2] * emp[4]
	}
	em[4] = em[3] * em[3]
	for k := 2; k <= 3; k++ {
		ef[k+3] = ef[k+2] * ef[4]
	}
	for k := 1; k <= 3; k++ { // negative multiples are conjugates
		if k <= 2 {
			em[2-k] = moonConj(em[2+k])
		}
		emp[3-k] = moonConj(emp[3+k])
		ef[3-k] = moonConj(ef[3+k])
	}
	var dm [5 * 5]complex128
	for i := range ed {
		for j := range em {
			dm[i*5+j] = ed[i] * em[j]
		}
	}
	var pf [8 * 7]complex128
	for i := range emp {
		for j := range ef {
			pf[i*7+j] = emp[i] * ef[j]
		}
	}

	// Meeus's additive terms, in 1e-6 deg.
	slp, clp := math.Sincos(lp)
	sa1, ca1 := math.Sincos(a1)
	sf, cf := imag(ef[4]), real(ef[4])
	smp, cmp := imag(emp[4]), real(emp[4])
	sumL := 3958*sa1 + 1962*(slp*cf-clp*sf) + 318*math.Sin(a2)
	sumB := -2235*slp + 382*math.Sin(a3) +
		175*(sa1*cf-ca1*sf) + 175*(sa1*cf+ca1*sf) +
		127*(slp*cmp-clp*smp) - 115*(slp*cmp+clp*smp)
	sumR := 0.0

	for i := range moonTableA {
		r := &moonTableA[i]
		z := dm[int(r.d)*5+int(r.m)+2] * pf[(int(r.mp)+3)*7+int(r.f)+3]
		sumL += r.sl * imag(z)
		sumR += r.sr * real(z)
	}
	for i := range moonTableB {
		r := &moonTableB[i]
		z := dm[int(r.d)*5+int(r.m)+2] * pf[(int(r.mp)+3)*7+int(r.f)+3]
		sumB += r.sb * imag(z)
	}

	lon = NormAngle(lp + sumL*1e-6*Deg2Rad)
	lat = sumB * 1e-6 * Deg2Rad
	distKm = moonMeanDistanceKm + sumR*1e-3
	return lon, lat, distKm
}

// moonCis returns exp(i x).
func moonCis(x float64) complex128 {
	s, c := math.Sincos(x)
	return complex(c, s)
}

// moonConj returns the complex conjugate of z.
func moonConj(z complex128) complex128 { return complex(real(z), -imag(z)) }
