package ephem

import "math"

// Place is where a body appears to one observer at one instant.
type Place struct {
	// OfDate is the topocentric apparent direction, true equator and
	// equinox of date, unit length.
	OfDate Vec3
	// RA and Dec are OfDate in spherical form (radians, RA in [0, 2pi)).
	RA, Dec float64
	// Alt is the geometric altitude, Az the azimuth (north through east).
	Alt, Az float64
	// AltApparent is Alt plus refraction (equal to Alt at pressure 0).
	AltApparent float64
	// HourAngle is the local apparent hour angle, radians in (-pi, pi].
	HourAngle float64
}

// Airmass returns the Kasten & Young airmass of the apparent altitude
// (+Inf below the horizon).
func (p Place) Airmass() float64 { return Airmass(p.AltApparent) }

func (l *Local) place(v Vec3) Place {
	u := v.Unit()
	var p Place
	p.OfDate = u
	p.RA, p.Dec, _ = VecToSpherical(u)
	p.Alt, p.Az = l.HorizontalOfDate(u)
	p.AltApparent = l.ApparentAlt(p.Alt)
	p.HourAngle = math.Remainder(l.LAST-p.RA, 2*math.Pi)
	return p
}

// SunPlace returns the Sun's topocentric apparent place.
func (l *Local) SunPlace() Place { return l.place(l.SunOfDate()) }

// MoonPlace returns the Moon's topocentric apparent place.
func (l *Local) MoonPlace() Place { return l.place(l.MoonOfDate()) }

// StarPlace returns a fixed target's apparent place; u is its GCRS unit
// direction (Star.Direction).
func (l *Local) StarPlace(u Vec3) Place { return l.place(l.StarOfDate(u)) }

// OrbitPlace returns a moving body's (conic, planet or Moon) topocentric apparent place, with the
// topocentric and the geocentric views (astrometric directions, distances,
// magnitude, rates) that produced it.
func (l *Local) OrbitPlace(c Mover) (p Place, topo, geo View) {
	s := l.Snap
	var zero Vec3
	geo = c.Observe(s.TT, s.EarthPos, s.EarthVel, zero, zero)
	u, topo := l.OrbitView(c)
	return l.place(u), topo, geo
}

// StarHADec returns a fixed target's apparent direction (GCRS unit vector u
// in, aberration applied) in the local hour-angle frame,
// (cos d cos H, -cos d sin H, sin d), not normalised (|v| - 1 ~ 1e-8).
// With Observer.HADecToHorizon it is the cheapest route to altitude.
func (l *Local) StarHADec(u Vec3) Vec3 {
	return l.GCRSToHADec.MulVec(Aberrate(u, l.beta))
}

// OrbitView is the topocentric half of OrbitPlace: the apparent true-of-date
// unit direction of a small body and the topocentric view (distance,
// magnitude, rates) it came from.
func (l *Local) OrbitView(c Mover) (ofDate Vec3, v View) {
	s := l.Snap
	v = c.Observe(s.TT, s.EarthPos, s.EarthVel, l.ObsPosAU, l.ObsVelAU)
	return s.NPB.MulVec(Aberrate(v.Astrometric.Unit(), l.beta)).Unit(), v
}
