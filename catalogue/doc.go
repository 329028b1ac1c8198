// Package catalogue is nightloom's bundled, offline sky catalogue: the stars
// to magnitude 6.5 and every named star, the NGC and IC deep-sky objects with
// their Messier numbers, type, magnitude and size, and the IAU constellation
// boundaries. It resolves the names observers type ("M 31", "ngc0224",
// "Vega", "alpha Lyr"), searches by name, type, magnitude and constellation,
// ranks what is well placed from a site on a night, and tells in which
// constellation any position lies.
//
// The data is embedded (data/catalogue.tsv.gz, 288 KiB) and parsed
// once, on first use. Its sources, licences and the script that builds it
// are in data/README.md. The package is pure computation on that data; it
// imports only ephem (precession to B1875, altitudes, twilight).
//
// # Positions
//
// Catalogue positions are ICRS (J2000.0) right ascension and declination in
// degrees, as given by the sources (to 0.0001 deg). Proper motions are not
// carried: the stars serve for finding and charts, where they matter little.
//
// # Constellations
//
// The IAU boundaries of 1930 (Delporte) run along lines of constant right
// ascension and declination of the mean equator and equinox of B1875.0. A
// position is precessed to B1875.0 (IAU 2006 precession, ephem's
// BiasPrecessionNutation with zero nutation) and found in the table of
// Roman (1987, PASP 99, 695; CDS catalogue VI/42) in its published search
// order: the first row whose declination floor lies at or below the point
// and whose right-ascension band holds it.
package catalogue
