package ephem

import (
	"encoding/csv"
	"math"
	"os"
	"strconv"
	"testing"
)

// readEarthRefTable reads a CSV reference table under testdata: lines starting
// with '#' are comments, the first other line names the columns, every
// further line is numbers.
func readEarthRefTable(t *testing.T, path string) [][]float64 {
	t.Helper()
	f, err := os.Open(path)
	if err != nil {
		t.Fatal(err)
	}
	defer f.Close()
	r := csv.NewReader(f)
	r.Comment = '#'
	recs, err := r.ReadAll()
	if err != nil {
		t.Fatalf("%s: %v", path, err)
	}
	if len(recs) < 2 {
		t.Fatalf("%s: no data rows", path)
	}
	rows := make([][]float64, 0, len(recs)-1)
	for _, rec := range recs[1:] {
		row := make([]float64, len(rec))
		for i, s := range rec {
			if row[i], err = strconv.ParseFloat(s, 64); err != nil {
				t.Fatalf("%s: %v", path, err)
			}
		}
		rows = append(rows, row)
	}
	return rows
}

// eclipticJ2000ToDate precesses ecliptic longitude and latitude from the
// ecliptic and equinox of J2000.0 to those of date, by Meeus, Astronomical
// Algorithms 2nd ed., eq. 21.5 (eta, Pi, p with T = 0) and 21.7 (rigorous
// ecliptic precession, IAU 1976 angles; from memory). t is Julian centuries
// from J2000.
func eclipticJ2000ToDate(lon, lat, t float64) (float64, float64) {
	eta := (47.0029*t - 0.03302*t*t + 0.000060*t*t*t) * Arcsec2Rad
	pi := 174.876384*Deg2Rad - (869.8089*t-0.03536*t*t)*Arcsec2Rad
	p := (5029.0966*t + 1.11113*t*t - 0.000006*t*t*t) * Arcsec2Rad
	se, ce := math.Sincos(eta)
	sb, cb := math.Sincos(lat)
	sd, cd := math.Sincos(pi - lon)
	a := ce*cb*sd - se*sb
	b := cb * cd
	c := ce*sb + se*cb*sd
	return NormAngle(p + pi - math.Atan2(a, b)), math.Asin(c)
}

// earthEclipticOfDate returns the Earth's heliocentric L, B (rad) and R (AU)
// referred to VSOP87's ecliptic and the equinox of date, the frame of
// VSOP87D and of Meeus's Appendix III, from EarthHeliocentric.
func earthEclipticOfDate(tt JD) (l, b, r float64) {
	pos, _ := EarthHeliocentric(tt)
	v := vsop87ToGCRS.TMulVec(pos) // back to VSOP87's J2000 ecliptic
	l, b, r = VecToSpherical(v)
	l, b = eclipticJ2000ToDate(l, b, tt.Centuries())
	return l, b, r
}

// Tolerances for the published worked examples. Meeus computed them with
// the abridged VSOP87D of his Appendix III, not the full series: for
// Example 25.b the full VSOP87D gives L = 19.9072972 deg, R = 0.99760852 AU,
// 0.27 arcsec and 7.7e-7 AU from the book's values (evaluated with the full
// series of astronomia 4.2.0, data/vsop87Dearth.js, by a one-off script),
// and our result is within 0.001 arcsec in L, 0.03 arcsec in B and 5e-8 AU
// of those (B = -0.744 arcsec full, -0.719 ours). So these
// checks confirm frames, precession to date and signs at the book's
// accuracy; TestEarthEpv00 checks the accuracy itself.
const (
	meeusEarthAngleTol = 0.4 * Arcsec2Rad
	meeusEarthDistTol  = 1e-6 // AU
)

// Meeus, Astronomical Algorithms, 2nd ed. (1998): Example 25.b (the Sun,
// 1992 Oct 13.0 TD, Earth's L = 19.907372 deg, B = -0.000179 deg (-0.644"),
// R = 0.99760775 AU) and Example 33.a (Venus, 1992 Dec 20.0 TD, Earth's
// L = 88.35704 deg, B = 0.00014 deg, R = 0.983824 AU). Both are referred to
// the ecliptic and equinox of date; the numbers are as quoted in the test
// suites of several public ports of Meeus's book (found with the search
// tool), not read from the book itself. The published rounding is added to
// the tolerance.
func TestEarthMeeusExamples(t *testing.T) {
	tests := []struct {
		name       string
		jd         float64
		lDeg, bDeg float64
		rAU        float64
		angRound   float64 // rad, half a unit of the last published digit
		distRound  float64 // AU
	}{
		{"Example 25.b", 2448908.5, 19.907372, -0.644 / 3600, 0.99760775, 0.0005 * Arcsec2Rad, 5e-9},
		{"Example 33.a", 2448976.5, 88.35704, 0.00014, 0.983824, 0.000005 * Deg2Rad, 5e-7},
	}
	for _, tc := range tests {
		l, b, r := earthEclipticOfDate(JD{tc.jd, 0})
		dl := math.Remainder(l-tc.lDeg*Deg2Rad, 2*math.Pi)
		db := b - tc.bDeg*Deg2Rad
		if tol := meeusEarthAngleTol + tc.angRound; math.Abs(dl) > tol {
			t.Errorf("%s: L = %.7f deg, want %.7f, error %.4f arcsec, tolerance %.4f arcsec",
				tc.name, l*Rad2Deg, tc.lDeg, dl*Rad2Arcsec, tol*Rad2Arcsec)
		}
		if tol := meeusEarthAngleTol + tc.angRound; math.Abs(db) > tol {
			t.Errorf("%s: B = %.4f arcsec, want %.4f, error %.4f arcsec, tolerance %.4f arcsec",
				tc.name, b*Rad2Arcsec, tc.bDeg*3600, db*Rad2Arcsec, tol*Rad2Arcsec)
		}
		if tol := meeusEarthDistTol + tc.distRound; math.Abs(r-tc.rAU) > tol {
			t.Errorf("%s: R = %.9f AU, want %.9f, error %.2e AU, tolerance %.1e AU",
				tc.name, r, tc.rAU, r-tc.rAU, tol)
		}
	}
}

// Tolerances against ERFA's epv00 (itself within a few km of JPL DE405 over
// 1900-2100), set above the worst errors of the truncated series measured at
// 2000 random instants in 1900-2100 (0.11 arcsec, 9.8e-8 AU, 1.4e-8 AU/day).
// The untruncated VSOP87B differs from epv00 by up to 0.04 arcsec, 4e-8 AU
// and 5e-9 AU/day.
const (
	epv00DirTol  = 0.15 * Arcsec2Rad
	epv00DistTol = 1.2e-7 // AU
	epv00VelTol  = 2e-8   // AU/day, norm of the velocity difference
)

// TestEarthEpv00 compares with testdata/ephem/earth/epv00.csv, made by
// gen_earth.py with pyerfa 2.0.0.1 (ERFA 2.0.0) erfa.epv00 at 100 random
// TT instants in 1900-2100.
func TestEarthEpv00(t *testing.T) {
	rows := readEarthRefTable(t, "../testdata/ephem/earth/epv00.csv")
	if len(rows) != 100 {
		t.Fatalf("epv00.csv: %d rows, want 100", len(rows))
	}
	var worstDir, worstDist, worstVel float64
	for _, row := range rows {
		tt := JD{row[0], row[1]}
		wantP := Vec3{row[2], row[3], row[4]}
		wantV := Vec3{row[5], row[6], row[7]}
		p, v := EarthHeliocentric(tt)
		dir := Separation(p, wantP)
		dist := math.Abs(p.Norm() - wantP.Norm())
		dv := v.Sub(wantV).Norm()
		worstDir = math.Max(worstDir, dir)
		worstDist = math.Max(worstDist, dist)
		worstVel = math.Max(worstVel, dv)
		if dir > epv00DirTol || dist > epv00DistTol || dv > epv00VelTol {
			t.Errorf("JD %.9f: direction error %.4f arcsec (tolerance %.2f), distance error %.2e AU (tolerance %.1e), velocity error %.2e AU/day (tolerance %.0e)",
				tt.Value(), dir*Rad2Arcsec, epv00DirTol*Rad2Arcsec, dist, epv00DistTol, dv, epv00VelTol)
		}
	}
	t.Logf("worst against epv00: direction %.4f arcsec, distance %.3e AU, velocity %.3e AU/day",
		worstDir*Rad2Arcsec, worstDist, worstVel)
}

// TestEarthVelocityIsDerivative checks the analytic velocity against the
// five-point central difference of the positions (step 0.1 day: the
// formula's own error, h^4 |x^(5)| / 30, is below 1e-13 AU/day, and the
// rounding of the positions, about 1e-13 AU, adds about 2e-12 AU/day).
func TestEarthVelocityIsDerivative(t *testing.T) {
	const h = 0.1     // days
	const tol = 1e-11 // AU/day
	for _, jd := range []float64{2415020.5, 2448908.5, 2451545.0, 2460676.25, 2488069.5} {
		tt := JD{jd, 0}
		_, v := EarthHeliocentric(tt)
		pm2, _ := EarthHeliocentric(tt.AddDays(-2 * h))
		pm1, _ := EarthHeliocentric(tt.AddDays(-h))
		pp1, _ := EarthHeliocentric(tt.AddDays(h))
		pp2, _ := EarthHeliocentric(tt.AddDays(2 * h))
		num := pm2.Sub(pp2).Add(pp1.Sub(pm1).Scale(8)).Scale(1 / (12 * h))
		if d := v.Sub(num).Norm(); d > tol {
			t.Errorf("JD %.2f: |v - dp/dt| = %.2e AU/day, tolerance %.0e", jd, d, tol)
		}
	}
}

// TestEarthVSOP87Tables checks the generated data for internal consistency:
// every derived angle's frequency is the sum or difference of its two
// parents, computed before it, and every term's frequency is its angle's.
func TestEarthVSOP87Tables(t *testing.T) {
	const freqTol = 1e-8 // rad per Julian millennium
	seen := make(map[float64]int)
	for i, a := range vsop87EarthAngles {
		if j, dup := seen[a.freq]; dup {
			t.Errorf("angles %d and %d: same frequency %v", j, i, a.freq)
		}
		seen[a.freq] = i
		if a.op == angleDirect {
			continue
		}
		if int(a.p) >= i || int(a.q) >= i || a.p < 0 || a.q < 0 {
			t.Fatalf("angle %d: parents %d, %d not earlier", i, a.p, a.q)
		}
		f := vsop87EarthAngles[a.p].freq + vsop87EarthAngles[a.q].freq
		if a.op == angleDiff {
			f = vsop87EarthAngles[a.p].freq - vsop87EarthAngles[a.q].freq
		}
		if math.Abs(f-a.freq) > freqTol {
			t.Errorf("angle %d: frequency %v, parents give %v", i, a.freq, f)
		}
	}
	for i, term := range vsop87EarthTerms {
		if term.c != vsop87EarthAngles[term.angle].freq {
			t.Errorf("term %d: frequency %v, angle %d has %v", i, term.c, term.angle, vsop87EarthAngles[term.angle].freq)
		}
	}
}

// TestEarthVSOP87Frame checks that the published VSOP87-to-FK5 matrix
// and EclipticJ2000ToGCRS differ by the expected 0.1 arcsec rotation, no
// more (a guard against a mistyped element).
func TestEarthVSOP87Frame(t *testing.T) {
	const tol = 0.15 * Arcsec2Rad
	for _, v := range []Vec3{{1, 0, 0}, {0, 1, 0}, {0, 0, 1}, {1, 1, 1}} {
		a := vsop87ToGCRS.MulVec(v)
		b := EclipticJ2000ToGCRS.MulVec(v)
		if d := Separation(a, b); d > tol {
			t.Errorf("axis %v: VSOP87 frame and EclipticJ2000ToGCRS differ by %.3f arcsec, tolerance %.2f", v, d*Rad2Arcsec, tol*Rad2Arcsec)
		}
	}
}

var earthBenchSink Vec3

func BenchmarkEarthHeliocentric(b *testing.B) {
	b.ReportAllocs()
	tt := JD{2460676.5, 0.25}
	var s Vec3
	for i := 0; i < b.N; i++ {
		p, v := EarthHeliocentric(tt.AddDays(float64(i&1023) * 0.37))
		s = s.Add(p).Add(v)
	}
	earthBenchSink = s
}
