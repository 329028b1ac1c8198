package catalogue

import (
	"errors"
	"fmt"
	"math"
	"strings"
	"testing"
	"time"

	"github.com/nightloom/nightloom/ephem"
)

// TestResolveSpellings resolves every spelling form. The identities are the
// standard cross-indexes (Messier 31 = NGC 224, Messier 42 = NGC 1976,
// Messier 45 the Pleiades; Vega = HIP 91262 = alpha Lyrae, Betelgeuse =
// HIP 27989, Polaris = HIP 11767, Sirius = HIP 32349; IC 434 in Orion),
// from memory, as any star atlas lists them.
func TestResolveSpellings(t *testing.T) {
	c := Default()
	tests := []struct {
		name, wantID, wantMatched string
	}{
		{"M31", "NGC 224", "M 31"},
		{"M 31", "NGC 224", "M 31"},
		{"m031", "NGC 224", "M 31"},
		{"Messier 31", "NGC 224", "M 31"},
		{"NGC 224", "NGC 224", "NGC 224"},
		{"ngc0224", "NGC 224", "NGC 224"},
		{"NGC224", "NGC 224", "NGC 224"},
		{"  n g c - 2 2 4 ", "NGC 224", "NGC 224"},
		{"IC 434", "IC 434", "IC 434"},
		{"ic0434", "IC 434", "IC 434"},
		{"M 42", "NGC 1976", "M 42"},
		{"M45", "M 45", "M 45"},
		{"pleiades", "M 45", "Pleiades"},
		{"Andromeda Galaxy", "NGC 224", "Andromeda Galaxy"},
		{"andromedagalaxy", "NGC 224", "Andromeda Galaxy"},
		{"Vega", "HIP 91262", "Vega"},
		{"VEGA", "HIP 91262", "Vega"},
		{"betelgeuse", "HIP 27989", "Betelgeuse"},
		{"Polaris", "HIP 11767", "Polaris"},
		{"Sirius", "HIP 32349", "Sirius"},
		{"alpha Lyr", "HIP 91262", "α Lyr"},
		{"α Lyr", "HIP 91262", "α Lyr"},
		{"Alpha-Lyr", "HIP 91262", "α Lyr"},
		{"HIP 91262", "HIP 91262", "HIP 91262"},
		{"hip091262", "HIP 91262", "HIP 91262"},
	}
	for _, tc := range tests {
		r, err := c.Resolve(tc.name)
		if err != nil {
			t.Errorf("Resolve(%q): %v", tc.name, err)
			continue
		}
		if r.Entry.ID != tc.wantID || r.Matched != tc.wantMatched {
			t.Errorf("Resolve(%q) = %s matched as %q, want %s as %q", tc.name, r.Entry.ID, r.Matched, tc.wantID, tc.wantMatched)
		}
	}
}

// TestResolveRefuses: unknown names get the nearest names, ambiguous ones
// every candidate. "Rosette Nebula" names several NGC numbers in the source;
// "Markab" is both alpha Pegasi and kappa Velorum.
func TestResolveRefuses(t *testing.T) {
	c := Default()
	tests := []struct {
		name     string
		want     error
		contains string // a candidate's name or ID that must be offered
	}{
		{"Andromda Galaxy", ErrUnknownName, "Andromeda Galaxy"},
		{"Betelguese", ErrUnknownName, "Betelgeuse"},
		{"NGC 99999", ErrUnknownName, "NGC 999"},
		{"M 111", ErrUnknownName, "M 11"},
		{"", ErrUnknownName, ""},
		{"Rosette Nebula", ErrAmbiguousName, "NGC 2244"},
		{"markab", ErrAmbiguousName, "HIP 113963"},
	}
	for _, tc := range tests {
		_, err := c.Resolve(tc.name)
		var ne *NameError
		if !errors.Is(err, tc.want) || !errors.As(err, &ne) {
			t.Errorf("Resolve(%q) error = %v, want %v", tc.name, err, tc.want)
			continue
		}
		if tc.contains == "" {
			continue
		}
		found := false
		for _, cand := range ne.Candidates {
			found = found || cand.Name == tc.contains || cand.Entry.ID == tc.contains
		}
		if !found {
			t.Errorf("Resolve(%q) offers %v, want it to include %q", tc.name, err, tc.contains)
		}
		if tc.want == ErrAmbiguousName && len(ne.Candidates) < 2 {
			t.Errorf("Resolve(%q): ambiguous with %d candidates", tc.name, len(ne.Candidates))
		}
	}
}

func TestSearch(t *testing.T) {
	c := Default()
	// Galaxies of Andromeda brighter than 9: M 31, M 32, M 110 at least.
	got, err := c.Search(Query{Type: "galaxy", Constellation: "andromeda", MagLimit: 9, HasMagLimit: true})
	if err != nil {
		t.Fatal(err)
	}
	var ids []string
	for _, e := range got {
		ids = append(ids, e.ID)
		if e.Constellation != "And" || !e.HasMag || e.Mag > 9 || typeGroups["galaxy"] == nil || !strings.Contains(e.TypeWords(), "galax") {
			t.Errorf("search returned %s (%s, %s, mag %.1f)", e.Label(), e.Constellation, e.TypeWords(), e.Mag)
		}
	}
	for _, want := range []string{"NGC 224", "NGC 221", "NGC 205"} {
		if !strings.Contains(strings.Join(ids, ","), want) {
			t.Errorf("galaxies in And brighter than 9 = %v, want %s among them", ids, want)
		}
	}
	// Text: "M 3" finds M 3 only, not M 31 or M 33.
	got, _ = c.Search(Query{Text: "M 3"})
	if len(got) != 1 || got[0].Messier != 3 {
		t.Errorf("Search(M 3) = %d entries, want M 3 alone", len(got))
	}
	// Brightest first, capped.
	got, _ = c.Search(Query{Type: "star", Limit: 3})
	if len(got) != 3 || got[0].Name != "Sirius" {
		t.Errorf("three brightest stars start with %v", got[0].Label())
	}
	for _, bad := range []Query{{Type: "spaceship"}, {Constellation: "Atlantis"}} {
		if _, err := c.Search(bad); !errors.Is(err, ErrQuery) {
			t.Errorf("Search(%+v) error = %v, want ErrQuery", bad, err)
		}
	}
}

// TestTonight ranks the night of 2027-01-14 at 44.12 N 5.24 E (the demo's
// invented site): every object returned rises above the floor in the dark,
// scores fall, and the winter sky's bright objects (M 42, M 45) are there
// while the summer ones (M 8 in Sagittarius) are not.
func TestTonight(t *testing.T) {
	c := Default()
	o, err := ephem.NewObserver(44.12, 5.24, 650)
	if err != nil {
		t.Fatal(err)
	}
	res, err := c.Tonight(TonightQuery{Observer: &o, Year: 2027, Month: time.January, Day: 14, MinAltDeg: 30, MagLimit: 6})
	if err != nil {
		t.Fatal(err)
	}
	if res.DarkHours < 10 || res.DarkHours > 13 {
		t.Errorf("dark hours %.1f, want 10-13 in mid-January at 44 N", res.DarkHours)
	}
	seen := map[int]bool{}
	for i, ob := range res.Objects {
		if ob.MaxAltDeg < 30 || ob.Hours <= 0 || ob.Score <= 0 || ob.Score > 1 || ob.Entry.Mag > 6 {
			t.Errorf("object %s: max alt %.1f, hours %.2f, score %.3f, mag %.1f", ob.Entry.Label(), ob.MaxAltDeg, ob.Hours, ob.Score, ob.Entry.Mag)
		}
		if i > 0 && ob.Score > res.Objects[i-1].Score {
			t.Errorf("scores not falling at %d", i)
		}
		seen[ob.Entry.Messier] = true
	}
	if !seen[42] || !seen[45] || seen[8] {
		t.Errorf("M 42 %v, M 45 %v, M 8 %v in tonight's list; want true, true, false", seen[42], seen[45], seen[8])
	}
	if _, err := c.Tonight(TonightQuery{Observer: &o, Year: 2027, Month: 1, Day: 14, MinAltDeg: 95}); !errors.Is(err, ErrQuery) {
		t.Errorf("minimum altitude 95: error %v, want ErrQuery", err)
	}
}

func TestEmbeddedData(t *testing.T) {
	c := Default()
	var stars, dsos, messier int
	for _, e := range c.Entries {
		switch e.Kind {
		case KindStar:
			stars++
		case KindDeepSky:
			dsos++
			if e.Messier > 0 {
				messier++
			}
		}
		if e.Constellation == "" {
			t.Errorf("%s has no constellation", e.ID)
		}
	}
	if stars < 8000 || dsos < 10000 || messier != 110 || len(c.Constellations()) != 88 {
		t.Errorf("%d stars, %d deep-sky objects, %d Messier, %d constellations", stars, dsos, messier, len(c.Constellations()))
	}
	t.Logf("%d stars, %d deep-sky objects (%d Messier), %d boundary rows, %d bytes embedded", stars, dsos, messier, len(c.bounds), len(embedded))
}

func ExampleCatalogue_Resolve() {
	c := Default()
	r, err := c.Resolve("ngc0224")
	if err != nil {
		panic(err)
	}
	e := r.Entry
	fmt.Printf("%s: %s, mag %.1f, %s, in %s\n", r.Matched, e.Label(), e.Mag, e.TypeWords(), c.ConstellationOf(e.RADeg, e.DecDeg).Name)
	_, err = c.Resolve("Betelguese")
	fmt.Println(err)
	// Output:
	// NGC 224: M 31 = NGC 224 (Andromeda Galaxy), mag 3.4, spiral galaxy, in Andromeda
	// catalogue: unknown name "Betelguese"; nearest: Betelgeuse, β Gem, β Leo, β Lep, β Lup
}

func BenchmarkResolve(b *testing.B) {
	c := Default()
	b.ReportAllocs()
	for b.Loop() {
		if _, err := c.Resolve("M 31"); err != nil {
			b.Fatal(err)
		}
	}
}

func BenchmarkConstellationOf(b *testing.B) {
	c := Default()
	b.ReportAllocs()
	var sink Constellation
	for i := 0; b.Loop(); i++ {
		sink = c.ConstellationOf(float64(i%360), float64(i%180-90))
	}
	_ = sink
}

// BenchmarkParse measures the one-time parse of the embedded data.
func BenchmarkParse(b *testing.B) {
	b.ReportAllocs()
	for b.Loop() {
		if _, err := parse(embedded); err != nil {
			b.Fatal(err)
		}
	}
}

// TestGnomonic checks the TAN projection against its definition
// (Calabretta & Greisen 2002, eqs. 54-55): a point 1 deg east of the tangent
// point on the equator lies at x = tan(1 deg) rad; the tangent point at 0.
func TestGnomonic(t *testing.T) {
	const tol = 1e-12 // deg
	x, y, ok := Gnomonic(100, 0, 101, 0)
	want := math.Tan(math.Pi/180) * 180 / math.Pi
	if !ok || math.Abs(x-want) > tol || math.Abs(y) > tol {
		t.Errorf("Gnomonic(100,0 -> 101,0) = %v, %v, %v; want %v, 0", x, y, ok, want)
	}
	if x, y, ok := Gnomonic(250, -40, 250, -40); !ok || x != 0 || y != 0 {
		t.Errorf("tangent point projects to %v, %v", x, y)
	}
	if _, _, ok := Gnomonic(0, 0, 180, 0); ok {
		t.Errorf("the antipode projects")
	}
}

// TestCrossings: a straight track from Vega (Lyra) to Deneb (Cygnus) starts
// in Lyr and ends in Cyg, with the crossings in time order.
func TestCrossings(t *testing.T) {
	c := Default()
	v, _ := c.Resolve("Vega")
	d, _ := c.Resolve("Deneb")
	a := ephem.SphericalToVec(v.Entry.RADeg*ephem.Deg2Rad, v.Entry.DecDeg*ephem.Deg2Rad)
	b := ephem.SphericalToVec(d.Entry.RADeg*ephem.Deg2Rad, d.Entry.DecDeg*ephem.Deg2Rad)
	t0 := time.Date(2027, 1, 1, 0, 0, 0, 0, time.UTC)
	var track []TrackPoint
	for i := 0; i <= 100; i++ {
		f := float64(i) / 100
		ra, dec, _ := ephem.VecToSpherical(a.Scale(1 - f).Add(b.Scale(f)))
		track = append(track, TrackPoint{Time: t0.Add(time.Duration(i) * time.Hour), RADeg: ra * ephem.Rad2Deg, DecDeg: dec * ephem.Rad2Deg})
	}
	cr := c.Crossings(track)
	if len(cr) == 0 || cr[0].From.Abbr != "Lyr" || cr[len(cr)-1].To.Abbr != "Cyg" {
		t.Fatalf("crossings %+v, want Lyr first and Cyg last", cr)
	}
	for i, x := range cr {
		if !x.By.After(x.After) || (i > 0 && x.After.Before(cr[i-1].By)) {
			t.Errorf("crossing %d out of order: %+v", i, x)
		}
	}
	f, err := c.Finder(track, 1, 3, 6.5, 10)
	if err != nil {
		t.Fatal(err)
	}
	if len(f.Stars) < 10 || f.RadiusDeg < 12 {
		t.Errorf("finder around Vega-Deneb: %d stars, radius %.1f deg", len(f.Stars), f.RadiusDeg)
	}
	xs, _, labels := c.Boundaries(f, 60)
	if len(xs) == 0 || labels["Lyr"] == [2]float64{} || labels["Cyg"] == [2]float64{} {
		t.Errorf("boundaries: %d points, labels %v", len(xs), labels)
	}
}

// FuzzResolve: any input either resolves to an entry whose own designation
// resolves back to it, or is refused with a *NameError; never a panic.
func FuzzResolve(f *testing.F) {
	for _, s := range []string{"M 31", "ngc0224", "Vega", "α Lyr", "Rosette Nebula", "", "\xff\xfe", "M 0", "NGC 00000000000000000000001", "hip", "  "} {
		f.Add(s)
	}
	c := Default()
	f.Fuzz(func(t *testing.T, name string) {
		if len(name) > 200 {
			return
		}
		r, err := c.Resolve(name)
		if err != nil {
			var ne *NameError
			if !errors.As(err, &ne) {
				t.Fatalf("Resolve(%q): %v is not a *NameError", name, err)
			}
			return
		}
		back, err := c.Resolve(r.Entry.ID)
		if err != nil || back.Entry != r.Entry {
			t.Fatalf("Resolve(%q) = %s, which does not resolve back: %v", name, r.Entry.ID, err)
		}
	})
}

// BenchmarkResolveUnknown measures a refused name: the nearest names are
// searched over every known name.
func BenchmarkResolveUnknown(b *testing.B) {
	c := Default()
	b.ReportAllocs()
	for b.Loop() {
		if _, err := c.Resolve("Betelguese"); err == nil {
			b.Fatal("resolved")
		}
	}
}

// BenchmarkTonight ranks a night's deep-sky objects to magnitude 10 on a
// 10-minute grid.
func BenchmarkTonight(b *testing.B) {
	c := Default()
	o, _ := ephem.NewObserver(44.12, 5.24, 650)
	b.ReportAllocs()
	for b.Loop() {
		if _, err := c.Tonight(TonightQuery{Observer: &o, Year: 2027, Month: time.January, Day: 14, MagLimit: 10, Type: "deep-sky"}); err != nil {
			b.Fatal(err)
		}
	}
}
