package catalogue

import (
	"bufio"
	"bytes"
	"compress/gzip"
	_ "embed"
	"fmt"
	"math"
	"strconv"
	"strings"
	"sync"
)

//go:embed data/catalogue.tsv.gz
var embedded []byte

// Kind tells stars from deep-sky objects.
type Kind int

// Entry kinds.
const (
	KindStar Kind = iota + 1
	KindDeepSky
)

// String returns "star" or "deep-sky object".
func (k Kind) String() string {
	switch k {
	case KindStar:
		return "star"
	case KindDeepSky:
		return "deep-sky object"
	}
	return "unknown"
}

// Type codes of the deep-sky objects, as the source (the Saguaro Astronomy
// Club database, through d3-celestial) classifies them, with their words.
var typeWords = map[string]string{
	"star": "star",
	"gg":   "galaxy cluster",
	"g":    "galaxy",
	"s":    "spiral galaxy",
	"s0":   "lenticular galaxy",
	"sd":   "dwarf spheroidal galaxy",
	"i":    "irregular galaxy",
	"e":    "elliptical galaxy",
	"oc":   "open cluster",
	"gc":   "globular cluster",
	"dn":   "dark nebula",
	"bn":   "bright nebula",
	"sfr":  "star-forming region",
	"rn":   "reflection nebula",
	"en":   "emission nebula",
	"pn":   "planetary nebula",
	"snr":  "supernova remnant",
	"pos":  "star cloud or asterism",
}

// typeGroups are the broad words a search may use for several codes.
var typeGroups = map[string][]string{
	"galaxy":  {"gg", "g", "s", "s0", "sd", "i", "e"},
	"cluster": {"oc", "gc"},
	"nebula":  {"dn", "bn", "sfr", "rn", "en", "pn", "snr"},
	"star":    {"star"},
	"deepsky": {"gg", "g", "s", "s0", "sd", "i", "e", "oc", "gc", "dn", "bn", "sfr", "rn", "en", "pn", "snr", "pos"},
}

// Entry is one catalogue object.
type Entry struct {
	// ID is the primary designation: "NGC 224", "IC 434", "M 45" (Messier
	// objects without an NGC/IC number), or "HIP 91262" for stars.
	ID   string
	Kind Kind
	// Type is the type code ("s", "oc", "pn", ..., "star"); TypeWords gives
	// the words.
	Type string
	// Name is the proper (stars) or common (deep-sky) name, "" if none.
	Name string
	// Messier is the Messier number, 0 if none.
	Messier int
	// HIP is the Hipparcos number of a star, 0 otherwise.
	HIP int
	// Bayer is a star's Greek letter ("α"), Flamsteed its number ("3"),
	// BayerCon the constellation they refer to ("Lyr").
	Bayer, Flamsteed, BayerCon string
	// RADeg, DecDeg: ICRS (J2000.0), degrees.
	RADeg, DecDeg float64
	// Mag is the visual magnitude (total, for extended objects); HasMag is
	// false where the source gives none.
	Mag    float64
	HasMag bool
	// MajorArcmin, MinorArcmin: apparent size, 0 where unknown (a round
	// object has Minor = Major).
	MajorArcmin, MinorArcmin float64
	// Constellation is the IAU abbreviation of the constellation holding
	// the position (computed from the boundaries, not taken from the source).
	Constellation string
}

// TypeWords returns the object type in words ("spiral galaxy").
func (e *Entry) TypeWords() string {
	if w, ok := typeWords[e.Type]; ok {
		return w
	}
	return e.Type
}

// Label is the designation an observer reads: "M 31 = NGC 224 (Andromeda
// Galaxy)", "Vega = HIP 91262 (α Lyr)".
func (e *Entry) Label() string {
	var b strings.Builder
	switch {
	case e.Kind == KindStar && e.Name != "":
		b.WriteString(e.Name + " = " + e.ID)
	case e.Messier > 0 && e.ID != fmt.Sprintf("M %d", e.Messier):
		fmt.Fprintf(&b, "M %d = %s", e.Messier, e.ID)
	default:
		b.WriteString(e.ID)
	}
	var extra []string
	if e.Kind == KindDeepSky && e.Name != "" {
		extra = append(extra, e.Name)
	}
	if d := e.BayerFlamsteed(); d != "" {
		extra = append(extra, d)
	}
	if len(extra) > 0 {
		b.WriteString(" (" + strings.Join(extra, ", ") + ")")
	}
	return b.String()
}

// BayerFlamsteed returns "α Lyr", "61 Cyg" or "" for a star.
func (e *Entry) BayerFlamsteed() string {
	switch {
	case e.BayerCon == "":
		return ""
	case e.Bayer != "":
		return e.Bayer + " " + e.BayerCon
	case e.Flamsteed != "":
		return e.Flamsteed + " " + e.BayerCon
	}
	return ""
}

// Size returns "190x62'" or "" when unknown.
func (e *Entry) Size() string {
	switch {
	case e.MajorArcmin == 0:
		return ""
	case e.MinorArcmin == 0 || e.MinorArcmin == e.MajorArcmin:
		return strconv.FormatFloat(e.MajorArcmin, 'f', -1, 64) + "'"
	}
	return strconv.FormatFloat(e.MajorArcmin, 'f', -1, 64) + "x" + strconv.FormatFloat(e.MinorArcmin, 'f', -1, 64) + "'"
}

// Catalogue holds the parsed entries, the constellation table and the name
// index. It is read-only after construction and safe for concurrent use.
type Catalogue struct {
	Entries []Entry
	names   map[string]string // abbreviation -> IAU name
	abbrs   []string          // abbreviations, alphabetical
	bounds  []bound
	index   map[string][]int // normalized name -> entry indexes
	keys    []nameKey        // every name once, for suggestions
}

type nameKey struct {
	norm, shown string
}

var (
	defaultOnce sync.Once
	defaultCat  *Catalogue
)

// Default returns the embedded catalogue, parsed on first use (about 80 ms of
// CPU, BenchmarkParse).
// It panics if the embedded data is corrupt, which the package's tests rule
// out: that would be a build error, not a run-time condition.
func Default() *Catalogue {
	defaultOnce.Do(func() {
		c, err := parse(embedded)
		if err != nil {
			panic(err)
		}
		defaultCat = c
	})
	return defaultCat
}

func parse(gz []byte) (*Catalogue, error) {
	zr, err := gzip.NewReader(bytes.NewReader(gz))
	if err != nil {
		return nil, fmt.Errorf("catalogue: embedded data: %w", err)
	}
	c := &Catalogue{names: map[string]string{}}
	sc := bufio.NewScanner(zr)
	line := 0
	for sc.Scan() {
		line++
		f := strings.Split(sc.Text(), "\t")
		bad := func(err error) error { return fmt.Errorf("catalogue: embedded data line %d: %v", line, err) }
		switch f[0] {
		case "C":
			if len(f) != 3 {
				return nil, bad(fmt.Errorf("want 3 fields"))
			}
			c.names[f[1]] = f[2]
			c.abbrs = append(c.abbrs, f[1])
		case "B":
			if len(f) != 5 {
				return nil, bad(fmt.Errorf("want 5 fields"))
			}
			var v [3]float64
			for i := range v {
				if v[i], err = strconv.ParseFloat(f[i+2], 64); err != nil {
					return nil, bad(err)
				}
			}
			c.bounds = append(c.bounds, bound{con: f[1], raLo: v[0], raHi: v[1], decLo: v[2]})
		case "S":
			if len(f) != 9 {
				return nil, bad(fmt.Errorf("want 9 fields"))
			}
			e := Entry{Kind: KindStar, Type: "star", ID: "HIP " + f[1], Name: f[5], Bayer: f[6], Flamsteed: f[7], BayerCon: f[8]}
			if e.HIP, err = strconv.Atoi(f[1]); err != nil {
				return nil, bad(err)
			}
			if err := e.parsePlace(f[2], f[3], f[4]); err != nil {
				return nil, bad(err)
			}
			c.Entries = append(c.Entries, e)
		case "D":
			if len(f) != 9 {
				return nil, bad(fmt.Errorf("want 9 fields"))
			}
			e := Entry{Kind: KindDeepSky, ID: f[1], Type: f[5], Name: f[8]}
			if err := e.parsePlace(f[2], f[3], f[4]); err != nil {
				return nil, bad(err)
			}
			if f[7] != "" {
				if e.Messier, err = strconv.Atoi(f[7]); err != nil {
					return nil, bad(err)
				}
			}
			if f[6] != "" {
				parts := strings.Split(f[6], "x")
				if e.MajorArcmin, err = strconv.ParseFloat(parts[0], 64); err != nil {
					return nil, bad(err)
				}
				e.MinorArcmin = e.MajorArcmin
				if len(parts) > 1 {
					if e.MinorArcmin, err = strconv.ParseFloat(parts[1], 64); err != nil {
						return nil, bad(err)
					}
				}
			}
			c.Entries = append(c.Entries, e)
		default:
			return nil, bad(fmt.Errorf("unknown record %q", f[0]))
		}
	}
	if err := sc.Err(); err != nil {
		return nil, fmt.Errorf("catalogue: embedded data: %w", err)
	}
	if len(c.names) != 88 || len(c.bounds) == 0 {
		return nil, fmt.Errorf("catalogue: embedded data has %d constellations and %d boundary rows", len(c.names), len(c.bounds))
	}
	for _, b := range c.bounds {
		if _, ok := c.names[b.con]; !ok {
			return nil, fmt.Errorf("catalogue: boundary row names unknown constellation %q", b.con)
		}
	}
	sortStrings(c.abbrs)
	for i := range c.Entries {
		e := &c.Entries[i]
		e.Constellation = c.ConstellationOf(e.RADeg, e.DecDeg).Abbr
	}
	c.buildIndex()
	return c, nil
}

func (e *Entry) parsePlace(ra, dec, mag string) error {
	var err error
	if e.RADeg, err = strconv.ParseFloat(ra, 64); err != nil {
		return err
	}
	if e.DecDeg, err = strconv.ParseFloat(dec, 64); err != nil {
		return err
	}
	if !(e.RADeg >= 0 && e.RADeg < 360 && e.DecDeg >= -90 && e.DecDeg <= 90) {
		return fmt.Errorf("position %s %s out of range", ra, dec)
	}
	if mag != "" {
		if e.Mag, err = strconv.ParseFloat(mag, 64); err != nil {
			return err
		}
		e.HasMag = !math.IsNaN(e.Mag)
	}
	return nil
}
