package ephem

// EarthHeliocentric returns the Earth's heliocentric position (AU) and
// velocity (AU/day) at TT (used as TDB), GCRS axes.
// Placeholder: replaced by the VSOP87 implementation.
func EarthHeliocentric(tt JD) (pos, vel Vec3) {
	panic("ephem: EarthHeliocentric not yet implemented")
}
