package catalogue

import (
	"errors"
	"fmt"
	"math"
	"regexp"
	"slices"
	"sort"
	"strconv"
	"strings"
	"unicode"
)

// Errors of name resolution, matched with errors.Is on a *NameError.
var (
	ErrUnknownName   = errors.New("catalogue: unknown name")
	ErrAmbiguousName = errors.New("catalogue: ambiguous name")
)

// MaxSuggestions is how many nearest names an unknown-name error offers.
const MaxSuggestions = 5

// NameError explains a refused name: unknown (with the nearest names by edit
// distance) or ambiguous (with every entry it names).
type NameError struct {
	Name      string
	Ambiguous bool
	// Candidates are the entries an ambiguous name fits, or the nearest
	// known names to an unknown one, best first.
	Candidates []Candidate
}

// Candidate is a name the catalogue knows and the entry it names.
type Candidate struct {
	Name  string // as the catalogue spells it: "M 31", "Vega", "α Lyr"
	Entry *Entry
}

func (e *NameError) Error() string {
	var names []string
	for _, c := range e.Candidates {
		names = append(names, c.Entry.Label())
	}
	if e.Ambiguous {
		return fmt.Sprintf("catalogue: %q is ambiguous: it names %s", e.Name, strings.Join(names, "; "))
	}
	if len(names) == 0 {
		return fmt.Sprintf("catalogue: unknown name %q", e.Name)
	}
	var near []string
	for _, c := range e.Candidates {
		near = append(near, c.Name)
	}
	return fmt.Sprintf("catalogue: unknown name %q; nearest: %s", e.Name, strings.Join(near, ", "))
}

// Is lets errors.Is match ErrUnknownName and ErrAmbiguousName.
func (e *NameError) Is(target error) bool {
	return (target == ErrAmbiguousName && e.Ambiguous) || (target == ErrUnknownName && !e.Ambiguous)
}

// Resolution is the entry a name resolved to and the catalogue spelling of
// the name that matched ("M 31" for "m031").
type Resolution struct {
	Entry   *Entry
	Matched string
}

// designation matches catalogue numbers after spaces, dots and dashes are
// removed and letters lowered: "m31", "messier31", "ngc0224", "ic434",
// "hip91262", with an optional letter suffix ("ngc2237a").
var designation = regexp.MustCompile(`^(m|messier|ngc|ic|hip)0*([0-9]+)([a-z]?)$`)

// greek spells the Greek letters of Bayer designations in Latin.
var greek = map[rune]string{
	'α': "alpha", 'β': "beta", 'γ': "gamma", 'δ': "delta", 'ε': "epsilon", 'ζ': "zeta",
	'η': "eta", 'θ': "theta", 'ι': "iota", 'κ': "kappa", 'λ': "lambda", 'μ': "mu",
	'ν': "nu", 'ξ': "xi", 'ο': "omicron", 'π': "pi", 'ρ': "rho", 'σ': "sigma", 'ς': "sigma",
	'τ': "tau", 'υ': "upsilon", 'φ': "phi", 'χ': "chi", 'ψ': "psi", 'ω': "omega",
}

// normWords lowers letters, spells Greek letters, and drops everything that
// is not a letter or digit: "Barnard's  Star" -> "barnardsstar".
func normWords(s string) string {
	var b strings.Builder
	for _, r := range strings.ToLower(s) {
		switch {
		case greek[r] != "":
			b.WriteString(greek[r])
		case r < unicode.MaxASCII && (unicode.IsLetter(r) || unicode.IsDigit(r)):
			b.WriteRune(r)
		case r >= unicode.MaxASCII && unicode.IsLetter(r):
			b.WriteRune(r)
		}
	}
	return b.String()
}

// normalize is the index key of a name: catalogue designations in canonical
// form ("ngc224"), other names by normWords.
func normalize(s string) string {
	k := normWords(s)
	if m := designation.FindStringSubmatch(k); m != nil {
		prefix := m[1]
		if prefix == "messier" {
			prefix = "m"
		}
		return prefix + m[2] + m[3]
	}
	return k
}

func (c *Catalogue) buildIndex() {
	c.index = map[string][]int{}
	add := func(i int, shown string) {
		if shown == "" {
			return
		}
		k := normalize(shown)
		for _, j := range c.index[k] {
			if j == i {
				return
			}
		}
		if len(c.index[k]) == 0 {
			c.keys = append(c.keys, nameKey{norm: k, shown: shown})
		}
		c.index[k] = append(c.index[k], i)
	}
	for i := range c.Entries {
		e := &c.Entries[i]
		add(i, e.ID)
		if e.Messier > 0 {
			add(i, "M "+strconv.Itoa(e.Messier))
		}
		add(i, e.Name)
		if e.BayerCon != "" {
			if e.Bayer != "" {
				add(i, e.Bayer+" "+e.BayerCon)
			}
			if e.Flamsteed != "" {
				add(i, e.Flamsteed+" "+e.BayerCon)
			}
		}
	}
}

// Resolve finds the one entry a name stands for. It accepts catalogue
// numbers with or without spaces and leading zeros ("M31", "M 31", "Messier
// 31", "NGC 224", "ngc0224", "IC 434", "HIP 91262"), proper and common names
// ("Vega", "betelgeuse", "Andromeda Galaxy"), and Bayer or Flamsteed
// designations with the constellation's abbreviation ("alpha Lyr", "α Lyr",
// "61 Cyg"); case, spaces and punctuation do not matter. An unknown or
// ambiguous name returns a *NameError with the nearest names or the
// candidates.
func (c *Catalogue) Resolve(name string) (Resolution, error) {
	k := normalize(name)
	hits := c.index[k]
	switch {
	case k == "":
		return Resolution{}, &NameError{Name: name}
	case len(hits) == 1:
		return Resolution{Entry: &c.Entries[hits[0]], Matched: c.shown(k, hits[0])}, nil
	case len(hits) > 1:
		ne := &NameError{Name: name, Ambiguous: true}
		for _, i := range hits {
			ne.Candidates = append(ne.Candidates, Candidate{Name: c.Entries[i].ID, Entry: &c.Entries[i]})
		}
		return Resolution{}, ne
	}
	return Resolution{}, &NameError{Name: name, Candidates: c.Nearest(name, MaxSuggestions)}
}

// shown returns the catalogue spelling of key k for entry i.
func (c *Catalogue) shown(k string, i int) string {
	e := &c.Entries[i]
	for _, s := range []string{e.ID, "M " + strconv.Itoa(e.Messier), e.Name, e.Bayer + " " + e.BayerCon, e.Flamsteed + " " + e.BayerCon} {
		if normalize(s) == k {
			return s
		}
	}
	return e.ID
}

// Nearest returns up to n known names closest to name by edit distance
// between normalized forms (ties: shorter, then alphabetical). The distance
// is the Levenshtein distance, or one more than the distance to the closest
// prefix of the known name when that is smaller, so that a misspelt start
// ("andromda") finds the longer name ("Andromeda Galaxy").
func (c *Catalogue) Nearest(name string, n int) []Candidate {
	k := normalize(name)
	type scored struct {
		d   int
		key nameKey
	}
	best := make([]scored, 0, n+1)
	var lv lev
	for _, nk := range c.keys {
		// A cheap lower bound: the length difference.
		bound := math.MaxInt
		if len(best) == n {
			bound = best[n-1].d
		}
		d, dp := lv.distance(k, nk.norm, bound)
		d = min(d, dp+1)
		if len(best) == n && d > best[n-1].d {
			continue
		}
		best = append(best, scored{d, nk})
		sort.SliceStable(best, func(i, j int) bool {
			if best[i].d != best[j].d {
				return best[i].d < best[j].d
			}
			if len(best[i].key.norm) != len(best[j].key.norm) {
				return len(best[i].key.norm) < len(best[j].key.norm)
			}
			return best[i].key.shown < best[j].key.shown
		})
		if len(best) > n {
			best = best[:n]
		}
	}
	out := make([]Candidate, 0, len(best))
	for _, s := range best {
		out = append(out, Candidate{Name: s.key.shown, Entry: &c.Entries[c.index[s.key.norm][0]]})
	}
	return out
}

// levenshtein is the edit distance (insertions, deletions, substitutions of
// one byte each) by the two-row dynamic program (Wagner & Fischer 1974),
// and the least distance from a to a prefix of b (the minimum of the last
// row, as in approximate prefix matching).
func levenshtein(a, b string) (full, prefix int) {
	var lv lev
	return lv.distance(a, b, math.MaxInt)
}

// lev holds the two rows of the dynamic program, reused between calls.
type lev struct{ prev, cur []int }

// distance is levenshtein with the rows of l. It gives up early, returning
// bound+1 for both, once every entry of a row exceeds bound: row minima
// never decrease, so neither result could then be bound or less.
func (l *lev) distance(a, b string, bound int) (full, prefix int) {
	if cap(l.prev) < len(b)+1 {
		l.prev, l.cur = make([]int, len(b)+1, 2*len(b)+2), make([]int, len(b)+1, 2*len(b)+2)
	}
	prev, cur := l.prev[:len(b)+1], l.cur[:len(b)+1]
	for j := range prev {
		prev[j] = j
	}
	for i := 1; i <= len(a); i++ {
		cur[0] = i
		for j := 1; j <= len(b); j++ {
			cost := 1
			if a[i-1] == b[j-1] {
				cost = 0
			}
			cur[j] = min(prev[j]+1, cur[j-1]+1, prev[j-1]+cost)
		}
		if bound < math.MaxInt && slices.Min(cur) > bound {
			return bound + 1, bound + 1
		}
		prev, cur = cur, prev
	}
	return prev[len(b)], min(prev[0], slices.Min(prev))
}
