// Package elements reads orbital elements in the trade's fixed-column
// one-line formats: the one-line comet format and the one-line minor-planet
// format in which the elements of all comets and of numbered and unnumbered
// minor planets are distributed. It is written from the formats' public
// description; columns below are 1-based and inclusive, as there.
//
// It is pure computation on text (no I/O): callers read the file and pass
// its contents. Each line becomes an ephem.Orbit (perihelion elements, J2000
// ecliptic, perihelion time in TT) with its brightness law, ready for
// ephem.NewConic. A malformed line is refused with a *LineError naming its
// line number and the columns at fault.
//
// # Comet format
//
//	cols    field
//	1-4     periodic comet number (blank if none)
//	5       orbit type: C, P, D, X, I or A
//	6-12    provisional designation, packed (blank for numbered comets)
//	15-18   year of perihelion passage
//	20-21   month of perihelion passage
//	23-29   day of perihelion passage, with decimals (TT)
//	31-39   perihelion distance q (AU)
//	42-49   eccentricity e
//	52-59   argument of perihelion (deg, J2000 ecliptic)
//	62-69   longitude of the ascending node (deg, J2000 ecliptic)
//	72-79   inclination (deg, J2000 ecliptic)
//	82-85   year of the osculation epoch (blank if none)
//	86-87   month of the osculation epoch
//	88-89   day of the osculation epoch (0h TT)
//	92-95   absolute magnitude M1
//	97-100  slope parameter n; the law is m = M1 + 5 log10(Delta) + 2.5 n log10(r), so K1 = 2.5 n
//	103-158 designation and name, readable
//	160-168 reference
//
// # Minor-planet format
//
//	cols    field
//	1-7     number (packed, cols 1-5) or provisional designation (packed)
//	9-13    absolute magnitude H
//	15-19   slope parameter G
//	21-25   osculation epoch, packed date (0h TT)
//	27-35   mean anomaly at the epoch M (deg)
//	38-46   argument of perihelion (deg, J2000 ecliptic)
//	49-57   longitude of the ascending node (deg, J2000 ecliptic)
//	60-68   inclination (deg, J2000 ecliptic)
//	71-79   eccentricity e
//	81-91   mean daily motion (deg/day)
//	93-103  semi-major axis a (AU)
//	167-194 readable designation (optional)
//
// Columns not listed (uncertainty, reference, observation counts, residual,
// perturbers, computer, flags, last observation) are kept only as text.
// A minor planet's perihelion distance is q = a (1 - e) and its perihelion
// time T = epoch - M/n with n = k a^-1.5 (the Gaussian constant k, so that
// the two-body propagation of ephem reproduces M at the epoch; the file's
// own mean daily motion must agree with it to 1e-4 relative, else the line
// is refused). T is taken within half a period of the epoch.
package elements

import (
	"errors"
	"fmt"
	"math"
	"strconv"
	"strings"
	"time"

	"github.com/nightloom/nightloom/ephem"
)

// Format says which one-line format a line is in.
type Format int

// Formats.
const (
	FormatComet Format = iota + 1
	FormatMinorPlanet
)

// String names the format.
func (f Format) String() string {
	switch f {
	case FormatComet:
		return "comet"
	case FormatMinorPlanet:
		return "minor planet"
	}
	return "Format(?)"
}

// Elements is one parsed line.
type Elements struct {
	Format Format
	// Designation is the readable designation ("C/2031 X1", "412P",
	// "1998 SQ108", "(433)"); Packed the packed form as written in the line
	// (number and type, or provisional); Name the readable name field
	// (comets) or readable designation field (minor planets), trimmed.
	Designation, Packed, Name string
	// Orbit holds q, e, i, node, argument of perihelion (J2000 ecliptic),
	// the perihelion time (TT) and the brightness law: MagComet with M1,
	// K1 for comets, MagAsteroid with H, G for minor planets; MagNone when
	// the magnitude fields are blank.
	Orbit ephem.Orbit
	// Epoch is the osculation epoch (a TT clock reading at 0h, labelled
	// UTC); zero when the line gives none.
	Epoch time.Time
	// MeanAnomalyDeg and SemiMajorAU are the minor-planet fields the
	// perihelion time and distance were computed from (zero for comets).
	MeanAnomalyDeg, SemiMajorAU float64
	// Line is the 1-based line number in the text parsed.
	Line int
}

// LineError is a malformed line: its number, the columns at fault (1-based,
// inclusive) with the field's name, and what is wrong.
type LineError struct {
	Line              int
	FirstCol, LastCol int
	Field             string
	Problem           string
}

func (e *LineError) Error() string {
	return fmt.Sprintf("elements: line %d, columns %d-%d (%s): %s", e.Line, e.FirstCol, e.LastCol, e.Field, e.Problem)
}

// ErrNoElements reports a text without any element line.
var ErrNoElements = errors.New("elements: no element lines")

// Parse reads every non-blank line of text. Lines starting with '#' are
// comments. With skipBad false, any bad line makes Parse return no elements
// and an error joining every *LineError (errors.As finds the first); with
// skipBad true it returns the good lines and the errors of the bad ones.
func Parse(text string, skipBad bool) ([]Elements, error) {
	var out []Elements
	var errs []error
	for i, line := range strings.Split(text, "\n") {
		line = strings.TrimRight(line, "\r")
		if strings.TrimSpace(line) == "" || strings.HasPrefix(line, "#") {
			continue
		}
		el, err := ParseLine(line, i+1)
		if err != nil {
			errs = append(errs, err)
			continue
		}
		out = append(out, el)
	}
	if len(errs) > 0 && !skipBad {
		return nil, errors.Join(errs...)
	}
	if len(out) == 0 && len(errs) == 0 {
		return nil, ErrNoElements
	}
	return out, errors.Join(errs...)
}

// Find returns the element line whose designation (readable or packed) is
// d, case-insensitively, or the only line when d is empty.
func Find(els []Elements, d string) (Elements, error) {
	if d == "" {
		if len(els) != 1 {
			return Elements{}, fmt.Errorf("elements: %d element lines; name one by its designation", len(els))
		}
		return els[0], nil
	}
	want := strings.ToLower(strings.TrimSpace(d))
	for _, e := range els {
		if strings.ToLower(e.Designation) == want || strings.ToLower(strings.TrimSpace(e.Packed)) == want ||
			(e.Name != "" && strings.ToLower(e.Name) == want) {
			return e, nil
		}
	}
	return Elements{}, fmt.Errorf("elements: no line with designation %q", d)
}

// Detect says which format line is in: a comet line has an orbit type
// letter in column 5 and only digits or blanks in columns 1-4 (a minor
// planet's packed designation there has a letter in columns 1-4, or a
// digit in column 5).
func Detect(line string) Format {
	if len(line) >= 5 && strings.IndexByte("CPDXIA", line[4]) >= 0 &&
		strings.Trim(line[:4], " 0123456789") == "" {
		return FormatComet
	}
	return FormatMinorPlanet
}

// ParseLine parses one line (lineNo is reported in errors) in the format
// Detect finds.
func ParseLine(line string, lineNo int) (Elements, error) {
	if Detect(line) == FormatComet {
		return ParseComet(line, lineNo)
	}
	return ParseMinorPlanet(line, lineNo)
}

// cols reads fixed columns of one line and records the first problem.
type cols struct {
	line string
	no   int
	err  *LineError
}

func (c *cols) fail(first, last int, field, format string, args ...any) {
	if c.err == nil {
		c.err = &LineError{Line: c.no, FirstCol: first, LastCol: last, Field: field, Problem: fmt.Sprintf(format, args...)}
	}
}

// raw returns columns first..last (1-based, inclusive), padded with blanks
// when the line is shorter.
func (c *cols) raw(first, last int) string {
	s := ""
	if first-1 < len(c.line) {
		s = c.line[first-1 : min(last, len(c.line))]
	}
	return s + strings.Repeat(" ", last-first+1-len(s))
}

// num reads a required number.
func (c *cols) num(first, last int, field string) float64 {
	s := strings.TrimSpace(c.raw(first, last))
	if s == "" {
		c.fail(first, last, field, "missing")
		return 0
	}
	x, err := strconv.ParseFloat(s, 64)
	if err != nil || math.IsNaN(x) || math.IsInf(x, 0) || strings.ContainsAny(s, "xXpP_") {
		c.fail(first, last, field, "not a number: %q", s)
		return 0
	}
	return x
}

// optNum reads a number that may be blank.
func (c *cols) optNum(first, last int, field string) (float64, bool) {
	if strings.TrimSpace(c.raw(first, last)) == "" {
		return 0, false
	}
	return c.num(first, last, field), true
}

// integer reads a required unsigned integer.
func (c *cols) integer(first, last int, field string) int {
	s := strings.TrimSpace(c.raw(first, last))
	n, err := strconv.Atoi(s)
	if err != nil || strings.ContainsAny(s, "+-") {
		if s == "" {
			c.fail(first, last, field, "missing")
		} else {
			c.fail(first, last, field, "not a whole number: %q", s)
		}
		return 0
	}
	return n
}

// blank requires the columns to be blank (separators).
func (c *cols) blank(first, last int) {
	if strings.TrimSpace(c.raw(first, last)) != "" {
		c.fail(first, last, "separator", "must be blank, found %q", c.raw(first, last))
	}
}

// angles reads the three angles and checks their ranges.
func (c *cols) angle(first, last int, field string, max float64) float64 {
	x := c.num(first, last, field)
	if c.err == nil && (x < 0 || x > max) {
		c.fail(first, last, field, "%g is outside [0, %g] deg", x, max)
	}
	return x
}

// minCometLen and minMinorLen are the shortest lines that hold every
// required field.
const (
	minCometLen = 79
	minMinorLen = 103
)

// ParseComet parses one line of the comet format.
func ParseComet(line string, lineNo int) (Elements, error) {
	c := &cols{line: line, no: lineNo}
	if len(line) < minCometLen {
		c.fail(len(line)+1, minCometLen, "line length", "line has %d characters; the comet format needs at least %d", len(line), minCometLen)
		return Elements{}, c.err
	}
	var el Elements
	el.Format, el.Line = FormatComet, lineNo
	numStr := strings.TrimSpace(c.raw(1, 4))
	typ := line[4]
	prov := c.raw(6, 12)
	switch {
	case strings.IndexByte("CPDXIA", typ) < 0:
		c.fail(5, 5, "orbit type", "must be one of C, P, D, X, I, A; found %q", string(typ))
	case numStr != "":
		n, err := strconv.Atoi(numStr)
		if err != nil || n < 1 || strings.ContainsAny(numStr, "+-") {
			c.fail(1, 4, "periodic comet number", "not a positive number: %q", numStr)
		}
		el.Designation = fmt.Sprintf("%d%c", n, typ)
		el.Packed = fmt.Sprintf("%04d%c", n, typ)
	default:
		d, err := UnpackCometProvisional(prov)
		if err != nil {
			// An asteroidal-style comet designation ("2031 XA4")
			// is packed as a minor planet's.
			if d2, err2 := UnpackProvisional(prov); err2 == nil {
				d, err = d2, nil
			}
		}
		if err != nil {
			c.fail(6, 12, "provisional designation", "%v", err)
		}
		el.Designation = fmt.Sprintf("%c/%s", typ, d)
		el.Packed = string(typ) + prov
	}
	c.blank(13, 14)
	year := c.integer(15, 18, "perihelion year")
	c.blank(19, 19)
	month := c.integer(20, 21, "perihelion month")
	c.blank(22, 22)
	day := c.num(23, 29, "perihelion day")
	if c.err == nil && (month < 1 || month > 12) {
		c.fail(20, 21, "perihelion month", "%d is not a month", month)
	}
	if c.err == nil && (day < 1 || day >= 32) {
		c.fail(23, 29, "perihelion day", "%g is not a day of the month", day)
	}
	if c.err == nil && day >= float64(daysIn(year, time.Month(month))+1) {
		c.fail(23, 29, "perihelion day", "%g is past the end of %04d-%02d", day, year, month)
	}
	q := c.num(31, 39, "perihelion distance")
	e := c.num(42, 49, "eccentricity")
	peri := c.angle(52, 59, "argument of perihelion", 360)
	node := c.angle(62, 69, "ascending node", 360)
	inc := c.angle(72, 79, "inclination", 180)
	if c.err == nil && !(q > 0) {
		c.fail(31, 39, "perihelion distance", "must be positive, found %g", q)
	}
	if c.err == nil && e < 0 {
		c.fail(42, 49, "eccentricity", "must not be negative, found %g", e)
	}
	if strings.TrimSpace(c.raw(82, 89)) != "" {
		ey := c.integer(82, 85, "epoch year")
		em := c.integer(86, 87, "epoch month")
		ed := c.integer(88, 89, "epoch day")
		if c.err == nil {
			t := time.Date(ey, time.Month(em), ed, 0, 0, 0, 0, time.UTC)
			if em < 1 || em > 12 || ed < 1 || t.Day() != ed {
				c.fail(82, 89, "epoch", "%04d-%02d-%02d is not a date", ey, em, ed)
			}
			el.Epoch = t
		}
	}
	m1, hasM := c.optNum(92, 95, "absolute magnitude")
	n, hasN := c.optNum(97, 100, "slope parameter")
	if c.err == nil && hasM != hasN {
		c.fail(92, 100, "magnitude law", "absolute magnitude and slope parameter must be given together")
	}
	el.Name = strings.TrimSpace(c.raw(103, 158))
	if c.err != nil {
		return Elements{}, c.err
	}
	el.Orbit = ephem.Orbit{QAU: q, E: e, IncDeg: inc, NodeDeg: node, PeriDeg: peri,
		PerihelionTT: ttDate(year, time.Month(month), day)}
	if hasM {
		el.Orbit.Law, el.Orbit.M1, el.Orbit.K1 = ephem.MagComet, m1, 2.5*n
	}
	if err := el.Orbit.Validate(); err != nil {
		return Elements{}, &LineError{Line: lineNo, FirstCol: 31, LastCol: 79, Field: "orbit", Problem: err.Error()}
	}
	return el, nil
}

// ParseMinorPlanet parses one line of the minor-planet format.
func ParseMinorPlanet(line string, lineNo int) (Elements, error) {
	c := &cols{line: line, no: lineNo}
	if len(line) < minMinorLen {
		c.fail(len(line)+1, minMinorLen, "line length", "line has %d characters; the minor-planet format needs at least %d", len(line), minMinorLen)
		return Elements{}, c.err
	}
	var el Elements
	el.Format, el.Line = FormatMinorPlanet, lineNo
	des := c.raw(1, 7)
	el.Packed = strings.TrimSpace(des)
	if strings.TrimSpace(des[5:]) == "" {
		n, err := UnpackNumber(des[:5])
		if err != nil {
			c.fail(1, 7, "designation", "%v", err)
		}
		el.Designation = fmt.Sprintf("(%d)", n)
	} else {
		d, err := UnpackProvisional(des)
		if err != nil {
			c.fail(1, 7, "designation", "%v", err)
		}
		el.Designation = d
	}
	c.blank(8, 8)
	h, hasH := c.optNum(9, 13, "absolute magnitude H")
	g, hasG := c.optNum(15, 19, "slope parameter G")
	c.blank(20, 20)
	ep := c.raw(21, 25)
	epoch, err := UnpackDate(ep)
	if err != nil {
		c.fail(21, 25, "epoch", "%v", err)
	}
	el.Epoch = epoch
	m := c.angle(27, 35, "mean anomaly", 360)
	peri := c.angle(38, 46, "argument of perihelion", 360)
	node := c.angle(49, 57, "ascending node", 360)
	inc := c.angle(60, 68, "inclination", 180)
	e := c.num(71, 79, "eccentricity")
	n := c.num(81, 91, "mean daily motion")
	a := c.num(93, 103, "semi-major axis")
	if c.err == nil && (e < 0 || e >= 1) {
		c.fail(71, 79, "eccentricity", "must be within [0, 1) for mean-anomaly elements, found %g", e)
	}
	if c.err == nil && !(a > 0) {
		c.fail(93, 103, "semi-major axis", "must be positive, found %g", a)
	}
	nk := gaussKDeg / (a * math.Sqrt(a)) // deg/day
	if c.err == nil && math.Abs(n/nk-1) > meanMotionTolRel {
		c.fail(81, 91, "mean daily motion", "%g deg/day disagrees with the semi-major axis (%.8f deg/day)", n, nk)
	}
	if c.err == nil && hasH != hasG {
		c.fail(9, 19, "magnitude law", "H and G must be given together")
	}
	el.Name = strings.TrimSpace(c.raw(167, 194))
	if c.err != nil {
		return Elements{}, c.err
	}
	// Perihelion time within half a period of the epoch.
	dm := m
	if dm > 180 {
		dm -= 360
	}
	ep0 := ttDate(epoch.Year(), epoch.Month(), float64(epoch.Day()))
	el.Orbit = ephem.Orbit{QAU: a * (1 - e), E: e, IncDeg: inc, NodeDeg: node, PeriDeg: peri,
		PerihelionTT: ep0.AddDays(-dm / nk)}
	if hasH {
		el.Orbit.Law, el.Orbit.H, el.Orbit.G = ephem.MagAsteroid, h, g
	}
	el.MeanAnomalyDeg, el.SemiMajorAU = m, a
	if err := el.Orbit.Validate(); err != nil {
		return Elements{}, &LineError{Line: lineNo, FirstCol: 27, LastCol: 103, Field: "orbit", Problem: err.Error()}
	}
	return el, nil
}

// gaussKDeg is the Gaussian gravitational constant in degrees per day
// (k = 0.01720209895 rad/day, IAU 1976): the mean motion at a = 1 AU.
const gaussKDeg = 0.01720209895 * 180 / math.Pi

// meanMotionTolRel is how far a line's mean daily motion may differ from
// k a^-1.5: the fields are printed to 8 and 7 decimals, so 1e-4 leaves room
// for rounding of small, slow bodies and still catches a swapped field.
const meanMotionTolRel = 1e-4

// ttDate returns the TT Julian date of a TT calendar date with a fractional
// day.
func ttDate(y int, m time.Month, day float64) ephem.JD {
	whole := math.Floor(day)
	return ephem.JDFromLabel(time.Date(y, m, int(whole), 0, 0, 0, 0, time.UTC)).AddDays(day - whole)
}

func daysIn(y int, m time.Month) int {
	return time.Date(y, m+1, 0, 0, 0, 0, 0, time.UTC).Day()
}
