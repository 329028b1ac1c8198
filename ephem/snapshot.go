package ephem

import "math"

// Snapshot holds everything at one instant that does not depend on where
// the observer stands: Earth orientation, the Earth's heliocentric state, and
// the geocentric apparent Sun and Moon. Build it once per time step with
// Prepare and share it between sites and targets.
type Snapshot struct {
	Instant
	DPsi, DEps float64 // nutation in longitude and obliquity (IAU 2000B)
	EpsA       float64 // mean obliquity of date (IAU 2006)
	NPB        Mat3    // GCRS -> true equator and equinox of date
	GAST       float64 // Greenwich apparent sidereal time, radians

	EarthPos, EarthVel Vec3 // heliocentric, GCRS axes, AU and AU/day
	beta               Vec3 // Earth velocity / c, for annual aberration

	// SunOfDate is the geocentric apparent Sun, true equator and equinox of
	// date, AU (aberration included; the length is the true distance).
	SunOfDate Vec3
	// MoonOfDate is the geocentric apparent Moon, true equator and equinox
	// of date, km (Meeus ch. 47 series, nutation and light time applied).
	MoonOfDate Vec3
}

// Prepare computes the snapshot at an instant. Methods: IAU 2006 precession
// with IAU 2000B nutation (orient.go), VSOP87 Earth (earth.go), ELP-2000/82
// as truncated by Meeus ch. 47 (moon.go); annual aberration to first order
// in v/c (Explanatory Supplement 3rd ed. eq. 7.40; the second-order term is
// below 1 mas).
func Prepare(in Instant) Snapshot {
	s := prepareSun(in)
	s.addMoon()
	return s
}

// prepareSun fills everything but the Moon (used by Sun event searches).
func prepareSun(in Instant) Snapshot {
	var s Snapshot
	s.Instant = in
	s.DPsi, s.DEps = Nutation2000B(in.TT)
	s.EpsA = MeanObliquity06(in.TT)
	s.NPB = BiasPrecessionNutation(in.TT, s.DPsi, s.DEps)
	s.GAST = NormAngle(GMST06(in.UT1, in.TT) + EquationOfEquinoxes(in.TT, s.DPsi, s.EpsA))

	s.EarthPos, s.EarthVel = EarthHeliocentric(in.TT)
	s.beta = s.EarthVel.Scale(1 / LightAUPerDay)

	// Sun: geocentric direction is minus the Earth's heliocentric vector;
	// the Sun's own motion during the 8.3 min light time is under 1 mas.
	sun := s.EarthPos.Scale(-1)
	d := sun.Norm()
	s.SunOfDate = s.NPB.MulVec(Aberrate(sun.Scale(1/d), s.beta)).Scale(d)
	return s
}

// addMoon fills MoonOfDate.
func (s *Snapshot) addMoon() {
	in := s.Instant

	// Moon: for the Moon the annual aberration cancels against the
	// Earth's own displacement during the light time, leaving only the
	// Moon's geocentric motion during ~1.28 s (Explanatory Supplement 3rd
	// ed. sec. 7.2.2). Meeus's mean longitude L' already includes that
	// light time (Astronomical Algorithms ch. 47), so only nutation is added.
	lon, lat, dist := MoonEclipticOfDate(in.TT)
	eps := s.EpsA + s.DEps
	ecl := SphericalToVec(lon+s.DPsi, lat).Scale(dist)
	rot := RotX(-eps)
	s.MoonOfDate = rot.MulVec(ecl)
}

// Aberrate applies annual (or total) aberration to a unit direction u for an
// observer moving at beta = v/c, to first order: u + beta - (u.beta) u.
// The result is not normalised (its length differs from 1 by ~1e-8).
func Aberrate(u, beta Vec3) Vec3 {
	k := u.Dot(beta)
	return Vec3{u[0] + beta[0] - k*u[0], u[1] + beta[1] - k*u[1], u[2] + beta[2] - k*u[2]}
}

// OfDate rotates a GCRS vector to the true equator and equinox of date.
func (s *Snapshot) OfDate(gcrs Vec3) Vec3 { return s.NPB.MulVec(gcrs) }

// ApparentOfDate turns a geocentric astrometric GCRS direction (light time
// already applied) into the apparent direction of date: aberration then
// precession-nutation. The result is a unit vector.
func (s *Snapshot) ApparentOfDate(astrometric Vec3) Vec3 {
	return s.NPB.MulVec(Aberrate(astrometric.Unit(), s.beta)).Unit()
}

// MoonIllumination returns the Moon's illuminated fraction and the position
// angle of its bright limb (radians, from north through east) as seen from
// the geocentre, by Meeus, Astronomical Algorithms ch. 48 (eqs. 48.2, 48.3
// and 48.5).
func (s *Snapshot) MoonIllumination() (fraction, brightLimb float64) {
	return illumination(s.SunOfDate.Scale(AUKm), s.MoonOfDate)
}

// illumination computes Meeus ch. 48 from Sun and Moon vectors (km) as seen
// by one observer.
func illumination(sun, moon Vec3) (fraction, brightLimb float64) {
	psi := Separation(sun, moon)        // geocentric elongation
	r, delta := sun.Norm(), moon.Norm() // Earth-Sun, Earth-Moon
	i := math.Atan2(r*math.Sin(psi), delta-r*math.Cos(psi))
	fraction = (1 + math.Cos(i)) / 2
	a0, d0, _ := VecToSpherical(sun)
	a, d, _ := VecToSpherical(moon)
	brightLimb = NormAngle(math.Atan2(math.Cos(d0)*math.Sin(a0-a),
		math.Sin(d0)*math.Cos(d)-math.Cos(d0)*math.Sin(d)*math.Cos(a0-a)))
	return fraction, brightLimb
}

// Local is a snapshot seen from one observer: the rotation from GCRS to the
// horizon and the observer's own place and motion. Build it with
// Snapshot.Local; it is a value (no allocation) and cheap to make.
type Local struct {
	Snap *Snapshot
	Obs  *Observer
	LAST float64 // local apparent sidereal time, radians
	// OfDateToHorizon rotates true-of-date vectors to (north, east, up).
	OfDateToHorizon Mat3
	// GCRSToHorizon is OfDateToHorizon * NPB.
	GCRSToHorizon Mat3
	// OfDateToHADec rotates true-of-date vectors to the local hour-angle
	// frame: (cos d cos H, -cos d sin H, sin d). GCRSToHADec is it times NPB.
	OfDateToHADec, GCRSToHADec Mat3
	// ObsOfDateKm is the observer's geocentric position, true equator of
	// date, km (for topocentric parallax).
	ObsOfDateKm Vec3
	// ObsPosAU and ObsVelAU are the observer's geocentric position (AU) and
	// velocity (AU/day) in GCRS axes, for small-body light time and rates.
	ObsPosAU, ObsVelAU Vec3
	// beta is (Earth + diurnal) velocity / c: total aberration for stars.
	beta Vec3
}

// Local returns the snapshot seen from o. The terrestrial frame is taken to
// be the true equator of date rotated by GAST (polar motion neglected: under
// 0.5 arcsec).
func (s *Snapshot) Local(o *Observer) Local {
	l := Local{Snap: s, Obs: o}
	l.LAST = NormAngle(s.GAST + o.LonRad)
	l.OfDateToHADec = RotZ(l.LAST)
	l.GCRSToHADec = l.OfDateToHADec.Mul(s.NPB)
	l.OfDateToHorizon = o.horizon.Mul(l.OfDateToHADec)
	l.GCRSToHorizon = l.OfDateToHorizon.Mul(s.NPB)
	st, ct := math.Sincos(s.GAST)
	p := o.itrsKm
	l.ObsOfDateKm = Vec3{ct*p[0] - st*p[1], st*p[0] + ct*p[1], p[2]}
	// Velocity of the observer: omega x r, km/s -> AU/day.
	w := earthRotRate * 86400 / AUKm
	velOfDate := Vec3{-w * l.ObsOfDateKm[1], w * l.ObsOfDateKm[0], 0}
	l.ObsPosAU = s.NPB.TMulVec(l.ObsOfDateKm.Scale(1 / AUKm))
	l.ObsVelAU = s.NPB.TMulVec(velOfDate)
	l.beta = s.beta.Add(l.ObsVelAU.Scale(1 / LightAUPerDay))
	return l
}

// HorizontalOfDate returns geometric altitude and azimuth (radians, azimuth
// from north through east) of a topocentric true-of-date vector.
func (l *Local) HorizontalOfDate(v Vec3) (alt, az float64) {
	return horizontal(l.OfDateToHorizon.MulVec(v))
}

func horizontal(h Vec3) (alt, az float64) {
	az = math.Atan2(h[1], h[0])
	if az < 0 {
		az += 2 * math.Pi
	}
	return math.Atan2(h[2], math.Hypot(h[0], h[1])), az
}

// StarHorizontal is the fast path for a fixed target: the geometric
// altitude and azimuth of the GCRS unit direction u (proper motion already
// applied), with annual and diurnal aberration. Stars have no measurable
// parallax at this precision; gravitational deflection (< 0.01 arcsec more
// than 15 deg from the Sun) is neglected.
func (l *Local) StarHorizontal(u Vec3) (alt, az float64) {
	return horizontal(l.GCRSToHorizon.MulVec(Aberrate(u, l.beta)))
}

// StarOfDate returns the apparent true-of-date unit direction of a fixed
// target with GCRS direction u, seen from this observer.
func (l *Local) StarOfDate(u Vec3) Vec3 {
	return l.Snap.NPB.MulVec(Aberrate(u, l.beta)).Unit()
}

// SunOfDate returns the topocentric apparent Sun, true of date, AU.
func (l *Local) SunOfDate() Vec3 {
	return l.Snap.SunOfDate.Sub(l.ObsOfDateKm.Scale(1 / AUKm))
}

// MoonOfDate returns the topocentric apparent Moon, true of date, km.
func (l *Local) MoonOfDate() Vec3 {
	return l.Snap.MoonOfDate.Sub(l.ObsOfDateKm)
}

// MoonIllumination is Snapshot.MoonIllumination seen from the observer
// (topocentric; differs from the geocentric value by up to ~0.008).
func (l *Local) MoonIllumination() (fraction, brightLimb float64) {
	return illumination(l.SunOfDate().Scale(AUKm), l.MoonOfDate())
}

// ApparentAlt converts a geometric altitude to the apparent one with the
// observer's refraction (identity at pressure 0).
func (l *Local) ApparentAlt(geometric float64) float64 {
	return geometric + l.Obs.Refraction(geometric)
}

// HourAngle returns the local apparent hour angle (radians in (-pi, pi]) of a
// true-of-date direction.
func (l *Local) HourAngle(ofDate Vec3) float64 {
	ra := math.Atan2(ofDate[1], ofDate[0])
	h := math.Remainder(l.LAST-ra, 2*math.Pi)
	return h
}

// MoonSemidiameter returns the Moon's angular semidiameter (radians) at a
// distance in km (mean radius 1737.4 km, IAU WG on cartographic coordinates).
func MoonSemidiameter(distKm float64) float64 { return math.Asin(1737.4 / distKm) }

// MaxBetweenSpan is the longest interval Between interpolates over: two
// minutes of UTC, a leap second included (days of TT).
const MaxBetweenSpan = 121.0 / 86400

// Between returns the snapshot at in from two snapshots a and b that
// bracket it (a.TT <= in.TT <= b.TT, b.TT - a.TT <= MaxBetweenSpan): the
// Earth's rotation (GMST, IAU 2006) is computed at in, and everything that
// changes slowly is interpolated linearly in TT between a and b: nutation,
// the mean obliquity, the bias-precession-nutation matrix, the equation of
// the equinoxes, the Earth's heliocentric position and velocity, and the
// Sun's and the Moon's geocentric places of date. The error of linear
// interpolation is at most a·dt²/8 for an acceleration a over a span dt:
// over 121 s the Moon's geocentric acceleration (2.7e-3 m/s²) gives 5 m at
// 384 000 km, 1.3e-8 rad (0.003 arcsec); the Sun's and the Earth's (6e-3
// m/s²) 1e-10 rad; nutation and precession far less. TestBetween checks
// it against Prepare. It costs a small fraction of Prepare, for direct
// evaluations at many instants between a grid's samples (edge
// refinement). It panics if in is outside [a, b] or the span is too long
// (a programmer error).
func Between(a, b *Snapshot, in Instant) Snapshot {
	span := (b.TT.Hi - a.TT.Hi) + (b.TT.Lo - a.TT.Lo)
	d := (in.TT.Hi - a.TT.Hi) + (in.TT.Lo - a.TT.Lo)
	if !(span > 0 && span <= MaxBetweenSpan*(1+1e-9) && d >= -1e-12 && d <= span+1e-12) {
		panic("ephem: Between needs a <= in <= b and a span of at most MaxBetweenSpan")
	}
	f := d / span
	lerp := func(x, y float64) float64 { return x + f*(y-x) }
	lerpV := func(x, y Vec3) Vec3 { return Vec3{lerp(x[0], y[0]), lerp(x[1], y[1]), lerp(x[2], y[2])} }
	var s Snapshot
	s.Instant = in
	s.DPsi, s.DEps, s.EpsA = lerp(a.DPsi, b.DPsi), lerp(a.DEps, b.DEps), lerp(a.EpsA, b.EpsA)
	for i := range s.NPB {
		for j := range s.NPB[i] {
			s.NPB[i][j] = lerp(a.NPB[i][j], b.NPB[i][j])
		}
	}
	// GAST = GMST + equation of the equinoxes; only the latter is
	// interpolated (wrapped differences: GAST and GMST are in [0, 2pi)).
	eqA := math.Remainder(a.GAST-GMST06(a.UT1, a.TT), 2*math.Pi)
	eqB := math.Remainder(b.GAST-GMST06(b.UT1, b.TT), 2*math.Pi)
	s.GAST = NormAngle(GMST06(in.UT1, in.TT) + lerp(eqA, eqB))
	s.EarthPos, s.EarthVel = lerpV(a.EarthPos, b.EarthPos), lerpV(a.EarthVel, b.EarthVel)
	s.beta = s.EarthVel.Scale(1 / LightAUPerDay)
	s.SunOfDate = lerpV(a.SunOfDate, b.SunOfDate)
	s.MoonOfDate = lerpV(a.MoonOfDate, b.MoonOfDate)
	return s
}
