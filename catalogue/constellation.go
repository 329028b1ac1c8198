package catalogue

import (
	"math"
	"sort"

	"github.com/nightloom/nightloom/ephem"
)

// B1875TT is the Besselian epoch B1875.0 as a TT Julian date:
// JD = 2415020.31352 + (B - 1900) * 365.242198781 (Lieske 1979, A&A 73, 282).
var B1875TT = ephem.JD{Hi: 2405889.0, Lo: 0.25855047500}

// icrsToB1875 rotates ICRS (GCRS) directions to the mean equator and equinox
// of B1875.0: the IAU 2006 bias-precession matrix at B1875 (nutation zero,
// as the 1930 boundaries are drawn on mean coordinates).
var icrsToB1875 = ephem.BiasPrecessionNutation(B1875TT, 0, 0)

// bound is one row of Roman's table: the band raLo <= RA < raHi (units of
// 10 s of time) above the declination floor decLo (units of 2.5 arcmin),
// B1875.0. Rows are in the published search order.
type bound struct {
	con               string
	raLo, raHi, decLo float64
}

// Constellation is one of the 88 IAU constellations.
type Constellation struct {
	Abbr string // "Ori"
	Name string // "Orion"
}

// ConstellationOf returns the constellation holding the ICRS (J2000.0)
// position raDeg, decDeg. A point exactly on a boundary belongs to the
// constellation on its north (declination) or east (right ascension) side,
// as in Roman's convention of inclusive floors and lower RA limits.
func (c *Catalogue) ConstellationOf(raDeg, decDeg float64) Constellation {
	return c.ConstellationOfVec(ephem.SphericalToVec(raDeg*ephem.Deg2Rad, decDeg*ephem.Deg2Rad))
}

// ConstellationOfVec is ConstellationOf for an ICRS direction (any length
// but zero): for a comet or planet, its astrometric direction.
func (c *Catalogue) ConstellationOfVec(u ephem.Vec3) Constellation {
	ra, dec := ToB1875(u)
	return c.lookupB1875(ra, dec)
}

// ToB1875 returns the right ascension in [0, 360) and declination of an
// ICRS direction on the mean equator and equinox of B1875.0, in degrees.
func ToB1875(u ephem.Vec3) (raDeg, decDeg float64) {
	lon, lat, _ := ephem.VecToSpherical(icrsToB1875.MulVec(u))
	return lon * ephem.Rad2Deg, lat * ephem.Rad2Deg
}

// lookupB1875 searches Roman's table for a B1875.0 position in degrees.
func (c *Catalogue) lookupB1875(raDeg, decDeg float64) Constellation {
	raUnits := math.Mod(raDeg, 360) / 360 * 8640 // 10 s of time
	if raUnits < 0 {
		raUnits += 8640
	}
	decUnits := decDeg * 24 // 2.5 arcmin
	for _, b := range c.bounds {
		if b.decLo <= decUnits && b.raLo <= raUnits && raUnits < b.raHi {
			return Constellation{Abbr: b.con, Name: c.names[b.con]}
		}
	}
	// The last rows of the table (Octans) cover the sky down to -90 deg;
	// only a NaN position falls through.
	return Constellation{}
}

// Constellations returns the 88 constellations, alphabetical by abbreviation.
func (c *Catalogue) Constellations() []Constellation {
	out := make([]Constellation, len(c.abbrs))
	for i, a := range c.abbrs {
		out[i] = Constellation{Abbr: a, Name: c.names[a]}
	}
	return out
}

// LookupConstellation finds a constellation by abbreviation or name, case
// and spaces ignored ("ori", "Orion", "ursa major").
func (c *Catalogue) LookupConstellation(s string) (Constellation, bool) {
	k := normWords(s)
	for _, a := range c.abbrs {
		if normWords(a) == k || normWords(c.names[a]) == k {
			return Constellation{Abbr: a, Name: c.names[a]}, true
		}
	}
	return Constellation{}, false
}

func sortStrings(s []string) { sort.Strings(s) }
