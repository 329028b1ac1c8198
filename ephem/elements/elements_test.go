package elements

import (
	"errors"
	"math"
	"strings"
	"testing"
	"time"

	"github.com/nightloom/nightloom/ephem"
)

// Lines written by hand from the formats' public description (columns in
// the package doc), for invented objects. The rulers mark columns 1-110.
//
//	         1         2         3         4         5         6         7         8         9        10        11
//	12345678901234567890123456789012345678901234567890123456789012345678901234567890123456789012345678901234567890
const (
	cometHyperbolic = "    CK31X010  2032 01 14.5282  0.214760  1.000412  128.3342  301.9915  141.0077  20320120   6.5  4.0  C/2031 X1 (Invented)                                     NL2031-1"
	cometNumbered   = "0412P         2029 11  3.0071  1.372050  0.612300    7.5000   84.2500   12.3456            11.0  3.2  412P/Nightloom (invented)"
	minorProvisonal = "K29B07Q 15.31  0.15 K31AH 200.12345   85.54321  123.45678   10.98765  0.1834567  0.21249448   2.7812345                                                               2029 BQ7"
	minorNumbered   = "A1234    9.80  0.25 K31AH  12.00000  300.00000   45.00000    5.00000  0.0500000  0.18057663   3.1000000                                                               (101234)"
)

// Tolerances.
const (
	fieldTol   = 1e-12 // numbers read from the text, exact to rounding
	periTolDay = 1e-9  // perihelion times, days (0.1 ms)
)

func mustParse(t *testing.T, line string) Elements {
	t.Helper()
	el, err := ParseLine(line, 1)
	if err != nil {
		t.Fatalf("ParseLine(%q): %v", line, err)
	}
	return el
}

func jd(t *testing.T, y int, m time.Month, day float64) ephem.JD {
	return ttDate(y, m, day)
}

// TestParseComet: every field of the comet format read from its columns.
func TestParseComet(t *testing.T) {
	el := mustParse(t, cometHyperbolic)
	o := el.Orbit
	want := ephem.Orbit{QAU: 0.214760, E: 1.000412, PeriDeg: 128.3342, NodeDeg: 301.9915, IncDeg: 141.0077,
		Law: ephem.MagComet, M1: 6.5, K1: 10}
	if el.Format != FormatComet || el.Designation != "C/2031 X1" || el.Packed != "CK31X010" || el.Name != "C/2031 X1 (Invented)" {
		t.Errorf("designation: got %v %q %q %q", el.Format, el.Designation, el.Packed, el.Name)
	}
	for _, f := range []struct {
		name      string
		got, want float64
	}{{"q", o.QAU, want.QAU}, {"e", o.E, want.E}, {"peri", o.PeriDeg, want.PeriDeg}, {"node", o.NodeDeg, want.NodeDeg},
		{"inc", o.IncDeg, want.IncDeg}, {"M1", o.M1, want.M1}, {"K1", o.K1, want.K1}} {
		if math.Abs(f.got-f.want) > fieldTol {
			t.Errorf("%s: got %v, want %v", f.name, f.got, f.want)
		}
	}
	if o.Law != ephem.MagComet {
		t.Errorf("law %v, want comet", o.Law)
	}
	// 2032 Jan 14.5282 TT.
	wantT := jd(t, 2032, time.January, 14.5282)
	if d := (o.PerihelionTT.Hi - wantT.Hi) + (o.PerihelionTT.Lo - wantT.Lo); math.Abs(d) > periTolDay {
		t.Errorf("perihelion off by %g days", d)
	}
	if !el.Epoch.Equal(time.Date(2032, 1, 20, 0, 0, 0, 0, time.UTC)) {
		t.Errorf("epoch %v, want 2032-01-20", el.Epoch)
	}

	el = mustParse(t, cometNumbered)
	if el.Designation != "412P" || el.Packed != "0412P" || !el.Epoch.IsZero() || el.Orbit.M1 != 11 || el.Orbit.K1 != 8 {
		t.Errorf("numbered comet: %+v", el)
	}
}

// TestParseMinorPlanet: every field of the minor-planet format; q and T
// from a, e and M. Check: M = n (epoch - T) with n = k a^-1.5, and q =
// a(1 - e), worked by hand from the line's numbers.
func TestParseMinorPlanet(t *testing.T) {
	el := mustParse(t, minorProvisonal)
	if el.Format != FormatMinorPlanet || el.Designation != "2029 BQ7" || el.Packed != "K29B07Q" || el.Name != "2029 BQ7" {
		t.Errorf("designation: %v %q %q %q", el.Format, el.Designation, el.Packed, el.Name)
	}
	o := el.Orbit
	a, e, m := 2.7812345, 0.1834567, 200.12345
	if math.Abs(o.QAU-a*(1-e)) > fieldTol || o.E != e || o.PeriDeg != 85.54321 || o.NodeDeg != 123.45678 || o.IncDeg != 10.98765 ||
		o.Law != ephem.MagAsteroid || o.H != 15.31 || o.G != 0.15 || el.MeanAnomalyDeg != m || el.SemiMajorAU != a {
		t.Errorf("fields: %+v", el)
	}
	epoch := jd(t, 2031, time.October, 17)
	n := 0.01720209895 * 180 / math.Pi / math.Pow(a, 1.5)
	// M > 180: the next perihelion, (360 - M)/n days after the epoch.
	wantT := epoch.AddDays((360 - m) / n)
	if d := (o.PerihelionTT.Hi - wantT.Hi) + (o.PerihelionTT.Lo - wantT.Lo); math.Abs(d) > periTolDay {
		t.Errorf("perihelion off by %g days", d)
	}
	// The conic reproduces the mean anomaly at the epoch: the position
	// there equals the one computed from M by Kepler's equation.
	c, err := ephem.NewConic(o)
	if err != nil {
		t.Fatal(err)
	}
	pos, _ := c.State(epoch)
	mr := m * math.Pi / 180
	E := mr
	for i := 0; i < 50; i++ {
		E -= (E - e*math.Sin(E) - mr) / (1 - e*math.Cos(E))
	}
	if r := a * (1 - e*math.Cos(E)); math.Abs(pos.Norm()-r) > 1e-9 {
		t.Errorf("r at epoch %.12f, want %.12f from Kepler's equation", pos.Norm(), r)
	}

	el = mustParse(t, minorNumbered)
	if el.Designation != "(101234)" || el.Packed != "A1234" || el.Name != "(101234)" {
		t.Errorf("numbered: %q %q %q", el.Designation, el.Packed, el.Name)
	}
	// M < 180: the last perihelion, M/n days before the epoch.
	n = 0.01720209895 * 180 / math.Pi / math.Pow(3.1, 1.5)
	wantT = epoch.AddDays(-12 / n)
	if d := (el.Orbit.PerihelionTT.Hi - wantT.Hi) + (el.Orbit.PerihelionTT.Lo - wantT.Lo); math.Abs(d) > periTolDay {
		t.Errorf("numbered: perihelion off by %g days", d)
	}
}

// replaceCols returns line with columns first..last (1-based) replaced by s
// (padded or cut to the width).
func replaceCols(line string, first, last int, s string) string {
	w := last - first + 1
	for len(s) < w {
		s = " " + s
	}
	s = s[:w]
	for len(line) < last {
		line += " "
	}
	return line[:first-1] + s + line[last:]
}

// TestMalformedColumns: a bad value in each field's columns is refused with
// the line number and exactly that column range.
func TestMalformedColumns(t *testing.T) {
	for _, tc := range []struct {
		base        string
		first, last int
		bad         string
	}{
		{cometHyperbolic, 1, 4, "x1"},
		{cometNumbered, 1, 4, "0000"},
		{cometHyperbolic, 5, 5, "Q"},
		{cometHyperbolic, 6, 12, "K31X000"},
		{cometHyperbolic, 13, 14, "x"},
		{cometHyperbolic, 15, 18, "20a2"},
		{cometHyperbolic, 20, 21, "13"},
		{cometHyperbolic, 23, 29, "32.0000"},
		{cometHyperbolic, 31, 39, "-0.1"},
		{cometHyperbolic, 42, 49, "one"},
		{cometHyperbolic, 52, 59, "361.0"},
		{cometHyperbolic, 62, 69, "abc"},
		{cometHyperbolic, 72, 79, "180.5"},
		{cometHyperbolic, 82, 85, "20x2"},
		{cometHyperbolic, 86, 87, "1x"},
		{cometHyperbolic, 88, 89, "x0"},
		{cometHyperbolic, 92, 95, "a.5"},
		{cometHyperbolic, 97, 100, "b.0"},
		{minorProvisonal, 1, 7, "K29b07Q"},
		{minorProvisonal, 8, 8, "x"},
		{minorProvisonal, 9, 13, "1x.31"},
		{minorProvisonal, 15, 19, "0.1x"},
		{minorProvisonal, 21, 25, "K31DH"},
		{minorProvisonal, 27, 35, "400.0"},
		{minorProvisonal, 38, 46, "ab"},
		{minorProvisonal, 49, 57, "-1.0"},
		{minorProvisonal, 60, 68, "181"},
		{minorProvisonal, 71, 79, "1.2"},
		{minorProvisonal, 81, 91, "0.3"},
		{minorProvisonal, 93, 103, "-2.5"},
		{minorNumbered, 1, 7, "A12x4"},
	} {
		line := replaceCols(tc.base, tc.first, tc.last, tc.bad)
		parse := ParseMinorPlanet
		if Detect(tc.base) == FormatComet {
			parse = ParseComet
		}
		_, err := parse(line, 7)
		var le *LineError
		if !errors.As(err, &le) {
			t.Errorf("cols %d-%d = %q: got %v, want a *LineError", tc.first, tc.last, tc.bad, err)
			continue
		}
		if le.Line != 7 || le.FirstCol != tc.first || le.LastCol != tc.last {
			t.Errorf("cols %d-%d = %q: got %v", tc.first, tc.last, tc.bad, le)
		}
	}
	// Too short a line names the missing columns.
	_, err := ParseLine(cometHyperbolic[:60], 3)
	var le *LineError
	if !errors.As(err, &le) || le.Line != 3 || le.FirstCol != 61 {
		t.Errorf("short line: %v", err)
	}
}

// TestDetect: which format a line is in.
func TestDetect(t *testing.T) {
	for _, tc := range []struct {
		line string
		want Format
	}{{cometHyperbolic, FormatComet}, {cometNumbered, FormatComet}, {minorProvisonal, FormatMinorPlanet},
		{minorNumbered, FormatMinorPlanet}, {"J98SA8Q", FormatMinorPlanet}, {"00433", FormatMinorPlanet}} {
		if got := Detect(tc.line); got != tc.want {
			t.Errorf("Detect(%.12q) = %v, want %v", tc.line, got, tc.want)
		}
	}
}

// TestParseAllOrNothing: one bad line refuses the file unless skipBad.
func TestParseAllOrNothing(t *testing.T) {
	text := "# invented objects\n" + cometHyperbolic + "\n\n" + replaceCols(minorProvisonal, 31, 35, "x") + "\n" + minorNumbered + "\n"
	els, err := Parse(text, false)
	var le *LineError
	if els != nil || !errors.As(err, &le) || le.Line != 4 {
		t.Fatalf("Parse: got %d elements, %v; want none and line 4", len(els), err)
	}
	if !strings.Contains(err.Error(), "line 4, columns 27-35") {
		t.Errorf("message %q should name line 4, columns 27-35", err)
	}
	els, err = Parse(text, true)
	if len(els) != 2 || err == nil {
		t.Fatalf("Parse(skipBad): got %d elements, %v", len(els), err)
	}
	if _, err := Parse("# nothing\n\n", false); !errors.Is(err, ErrNoElements) {
		t.Errorf("empty file: %v", err)
	}
	got, err := Find(els, "c/2031 x1")
	if err != nil || got.Line != 2 {
		t.Errorf("Find: %v %v", got.Line, err)
	}
	if _, err := Find(els, ""); err == nil {
		t.Errorf("Find without a designation in a file of 2 lines must fail")
	}
}

// TestPacked: packed numbers, provisional designations, comet designations
// and dates, both ways. Expected values worked by hand from the packing
// rules in the formats' description.
func TestPacked(t *testing.T) {
	for _, tc := range []struct {
		n      int
		packed string
	}{{1, "00001"}, {99999, "99999"}, {100000, "A0000"}, {101234, "A1234"}, {360017, "a0017"}, {619999, "z9999"},
		{620000, "~0000"}, {620061, "~000z"}, {3140113, "~AZaz"}} {
		p, err := PackNumber(tc.n)
		if err != nil || p != tc.packed {
			t.Errorf("PackNumber(%d) = %q, %v; want %q", tc.n, p, err, tc.packed)
		}
		n, err := UnpackNumber(tc.packed)
		if err != nil || n != tc.n {
			t.Errorf("UnpackNumber(%q) = %d, %v; want %d", tc.packed, n, err, tc.n)
		}
	}
	for _, tc := range []struct{ readable, packed string }{
		{"2029 BQ7", "K29B07Q"}, {"1998 SQ108", "J98SA8Q"}, {"2031 AA", "K31A00A"}, {"1899 YZ619", "I99Yz9Z"}, {"2040 QC362", "K40Qa2C"},
	} {
		p, err := PackProvisional(tc.readable)
		if err != nil || p != tc.packed {
			t.Errorf("PackProvisional(%q) = %q, %v; want %q", tc.readable, p, err, tc.packed)
		}
		r, err := UnpackProvisional(tc.packed)
		if err != nil || r != tc.readable {
			t.Errorf("UnpackProvisional(%q) = %q, %v; want %q", tc.packed, r, err, tc.readable)
		}
	}
	for _, tc := range []struct{ readable, packed string }{
		{"2031 X1", "K31X010"}, {"2031 X1-B", "K31X01b"}, {"1995 Q123", "J95QC30"},
	} {
		p, err := PackCometProvisional(tc.readable)
		if err != nil || p != tc.packed {
			t.Errorf("PackCometProvisional(%q) = %q, %v; want %q", tc.readable, p, err, tc.packed)
		}
		r, err := UnpackCometProvisional(tc.packed)
		if err != nil || r != tc.readable {
			t.Errorf("UnpackCometProvisional(%q) = %q, %v; want %q", tc.packed, r, err, tc.readable)
		}
	}
	for _, tc := range []struct {
		date   time.Time
		packed string
	}{{time.Date(2031, 10, 17, 0, 0, 0, 0, time.UTC), "K31AH"}, {time.Date(1999, 1, 1, 0, 0, 0, 0, time.UTC), "J9911"},
		{time.Date(2100, 12, 31, 0, 0, 0, 0, time.UTC), "L00CV"}} {
		p, err := PackDate(tc.date)
		if err != nil || p != tc.packed {
			t.Errorf("PackDate(%v) = %q, %v; want %q", tc.date, p, err, tc.packed)
		}
		d, err := UnpackDate(tc.packed)
		if err != nil || !d.Equal(tc.date) {
			t.Errorf("UnpackDate(%q) = %v, %v; want %v", tc.packed, d, err, tc.date)
		}
	}
	for _, bad := range []string{"K31D1", "K31BV", "K3x11", "Z3111", "K311"} { // month 13, Feb 31, ...
		if _, err := UnpackDate(bad); err == nil {
			t.Errorf("UnpackDate(%q) accepted", bad)
		}
	}
}

// TestImportedMatchesJSON: an imported line and the same elements entered
// by hand (as the JSON orbit target carries them) give the same position
// to 0.001 arcsec.
func TestImportedMatchesJSON(t *testing.T) {
	const tolArcsec = 0.001
	el := mustParse(t, cometHyperbolic)
	byHand := ephem.Orbit{QAU: 0.21476, E: 1.000412, IncDeg: 141.0077, NodeDeg: 301.9915, PeriDeg: 128.3342,
		PerihelionTT: ephem.JDFromLabel(time.Date(2032, 1, 14, 12, 40, 36, 480000000, time.UTC)), // 14.5282 d
		Law:          ephem.MagComet, M1: 6.5, K1: 10}
	a, _ := ephem.NewConic(el.Orbit)
	b, _ := ephem.NewConic(byHand)
	in := ephem.NewInstant(time.Date(2032, 1, 10, 5, 0, 0, 0, time.UTC))
	s := ephem.Prepare(in)
	var z ephem.Vec3
	va := a.Observe(s.TT, s.EarthPos, s.EarthVel, z, z)
	vb := b.Observe(s.TT, s.EarthPos, s.EarthVel, z, z)
	if d := ephem.Separation(va.Astrometric, vb.Astrometric) * ephem.Rad2Arcsec; d > tolArcsec {
		t.Errorf("imported and by-hand elements differ by %.6f arcsec (tolerance %g)", d, tolArcsec)
	}
}
