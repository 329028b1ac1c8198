package catalogue

import (
	"errors"
	"fmt"
	"math"
	"sort"
	"strconv"
	"strings"
)

// ErrQuery reports a search the catalogue cannot run (unknown type or
// constellation); the message names the field.
var ErrQuery = errors.New("catalogue: bad query")

// Query selects entries. Zero fields select everything.
type Query struct {
	// Text is part of a name or designation, case and spaces ignored
	// ("andromeda", "NGC 70", "M 3").
	Text string
	// Type is a type code ("s", "pn"), its words ("planetary nebula") or
	// a group: "galaxy", "cluster", "nebula", "star", "deep-sky".
	Type string
	// MagLimit keeps entries at least as bright as this visual magnitude
	// (entries without a magnitude are dropped) when HasMagLimit is set.
	MagLimit    float64
	HasMagLimit bool
	// Constellation is an IAU abbreviation or name ("Ori", "Orion").
	Constellation string
	// Limit caps the number of results (0: no cap).
	Limit int
}

// typeSet returns the codes a query's Type stands for, nil for any.
func typeSet(t string) (map[string]bool, error) {
	if strings.TrimSpace(t) == "" {
		return nil, nil
	}
	k := normWords(t)
	set := map[string]bool{}
	for g, codes := range typeGroups {
		if k == g || k == g+"s" || (g == "galaxy" && k == "galaxies") {
			for _, c := range codes {
				set[c] = true
			}
		}
	}
	for code, words := range typeWords {
		if k == normWords(code) || k == normWords(words) {
			set[code] = true
		}
	}
	if len(set) == 0 {
		return nil, fmt.Errorf("%w: type %q is none of galaxy, cluster, nebula, star, deep-sky or a type code (%s)", ErrQuery, t, strings.Join(TypeCodes(), ", "))
	}
	return set, nil
}

// TypeCodes lists the type codes, sorted.
func TypeCodes() []string {
	var out []string
	for c := range typeWords {
		out = append(out, c)
	}
	sort.Strings(out)
	return out
}

// Search returns the entries a query selects, brightest first (entries
// without a magnitude last), then by designation.
func (c *Catalogue) Search(q Query) ([]*Entry, error) {
	types, err := typeSet(q.Type)
	if err != nil {
		return nil, err
	}
	con := ""
	if strings.TrimSpace(q.Constellation) != "" {
		k, ok := c.LookupConstellation(q.Constellation)
		if !ok {
			return nil, fmt.Errorf("%w: constellation %q is not an IAU abbreviation or name", ErrQuery, q.Constellation)
		}
		con = k.Abbr
	}
	if q.HasMagLimit && (math.IsNaN(q.MagLimit) || math.IsInf(q.MagLimit, 0)) {
		return nil, fmt.Errorf("%w: magnitude limit must be finite", ErrQuery)
	}
	text := normalize(q.Text)
	var out []*Entry
	for i := range c.Entries {
		e := &c.Entries[i]
		if types != nil && !types[e.Type] {
			continue
		}
		if con != "" && e.Constellation != con {
			continue
		}
		if q.HasMagLimit && (!e.HasMag || e.Mag > q.MagLimit) {
			continue
		}
		if text != "" && !e.matchesText(text) {
			continue
		}
		out = append(out, e)
	}
	sortByMag(out)
	if q.Limit > 0 && len(out) > q.Limit {
		out = out[:q.Limit]
	}
	return out, nil
}

// matchesText tells whether any of the entry's names contains the
// normalized text; a full catalogue designation ("ngc224") must match one
// exactly, so "M 3" finds M 3 and not M 31.
func (e *Entry) matchesText(text string) bool {
	names := []string{e.ID, e.Name}
	if e.Messier > 0 {
		names = append(names, "M "+strconv.Itoa(e.Messier))
	}
	if e.BayerCon != "" {
		names = append(names, e.Bayer+" "+e.BayerCon, e.Flamsteed+" "+e.BayerCon)
	}
	exact := designation.MatchString(normWords(text)) || designation.MatchString(text)
	for _, n := range names {
		k := normalize(n)
		if k == "" {
			continue
		}
		if k == text || (!exact && strings.Contains(k, text)) {
			return true
		}
	}
	return false
}

func sortByMag(es []*Entry) {
	sort.SliceStable(es, func(i, j int) bool {
		a, b := es[i], es[j]
		if a.HasMag != b.HasMag {
			return a.HasMag
		}
		if a.HasMag && a.Mag != b.Mag {
			return a.Mag < b.Mag
		}
		return a.ID < b.ID
	})
}

// StarsIn returns the stars at least as bright as magLimit within radiusDeg
// of the ICRS position raDeg, decDeg (for finder charts), brightest first.
func (c *Catalogue) StarsIn(raDeg, decDeg, radiusDeg, magLimit float64) []*Entry {
	cosR := math.Cos(radiusDeg * math.Pi / 180)
	sd, cd := math.Sincos(decDeg * math.Pi / 180)
	var out []*Entry
	for i := range c.Entries {
		e := &c.Entries[i]
		if e.Kind != KindStar || !e.HasMag || e.Mag > magLimit {
			continue
		}
		s2, c2 := math.Sincos(e.DecDeg * math.Pi / 180)
		if sd*s2+cd*c2*math.Cos((e.RADeg-raDeg)*math.Pi/180) >= cosR {
			out = append(out, e)
		}
	}
	sortByMag(out)
	return out
}
