// Package ephem is nightloom's ephemeris engine: time scales, Earth
// orientation, the Sun, the Moon, fixed stars and small bodies on two-body
// orbits, topocentric places, refraction, airmass and rise/set/twilight events.
//
// It is pure computation: no I/O, no logging, no global state beyond constant
// tables.
//
// # Units
//
// Radians inside, degrees only where a name says so (suffix Deg). Distances
// carry their unit in the name (AU, Km, M). Instants enter and leave as
// time.Time (UTC, which has no leap seconds) and are converted once, at the
// edge, to an [Instant] that holds TT and UT1 as two-part Julian dates.
//
// # Speed
//
// Everything that depends only on the instant (precession-nutation matrix,
// sidereal time, the Earth's heliocentric state, the Sun and the Moon) is
// computed once by [Prepare] into a [Snapshot] and reused for every target at
// that instant. A site's view of a snapshot ([Snapshot.Local]) adds the local
// sidereal rotation, so a fixed target's altitude and azimuth cost two
// matrix-vector products and a refraction formula.
//
// # Frames
//
// Vectors called GCRS are geocentric, axes of the ICRS (J2000 mean equator and
// equinox corrected by the frame bias). "Of date" means the true equator and
// equinox of date (apparent places, as in almanacs). Ecliptic J2000 is the
// ecliptic and mean equinox of J2000.0 used by orbital elements.
package ephem
