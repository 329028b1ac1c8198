package ephem

// Obliquity of the ecliptic at J2000.0, IAU 2006 (Hilton et al. 2006,
// Celest. Mech. 94, 351): 84381.406 arcsec.
const ObliquityJ2000 = 84381.406 * Arcsec2Rad

// EclipticJ2000ToGCRS rotates vectors from the ecliptic and mean equinox of
// J2000.0 to the J2000 mean equator (treated as the GCRS axes; the 23 mas
// frame bias between them is below every tolerance this package works to).
var EclipticJ2000ToGCRS = RotX(-ObliquityJ2000)
