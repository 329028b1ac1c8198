package constraints

import (
	"errors"
	"math"
	"math/rand/v2"
	"reflect"
	"testing"
	"time"

	"github.com/nightloom/nightloom/ephem"
)

// TestTrackAllMatchesTrack: the batch (ranges per worker, a shared slab per
// range, chunks taken from other ranges once a worker's own is done) gives
// every target exactly the track Grid.Track gives it, for any worker count,
// with a moving target and a nil one mixed in.
func TestTrackAllMatchesTrack(t *testing.T) {
	site := benchSite(t)
	start := time.Date(2026, 12, 24, 17, 0, 0, 0, time.UTC)
	g, err := NewGrid(site, start, start.Add(3*time.Hour), time.Minute, Options{})
	if err != nil {
		t.Fatal(err)
	}
	rng := rand.New(rand.NewPCG(3, 4))
	targets := make([]*Target, 75)
	for i := range targets {
		st, _ := ephem.NewStar(rng.Float64()*360, -30+rng.Float64()*120, 0, 0)
		targets[i] = &Target{Star: &st}
	}
	targets[40] = &Target{Name: "comet", Orbit: inventedComet(t)}
	targets[61] = nil
	for _, workers := range []int{1, 2, 3, 7} {
		tracks, err := g.TrackAll(targets, workers)
		if !errors.Is(err, ErrTarget) {
			t.Errorf("workers %d: error %v, want ErrTarget for the nil target", workers, err)
		}
		for i, tg := range targets {
			if tg == nil {
				if tracks[i] != nil {
					t.Errorf("workers %d: a track for the nil target", workers)
				}
				continue
			}
			want, err := g.Track(tg)
			if err != nil {
				t.Fatal(err)
			}
			got := tracks[i]
			if got == nil || got.Target != tg {
				t.Fatalf("workers %d: target %d has no track of its own", workers, i)
			}
			for name, pair := range map[string][2][]float32{
				"Alt": {got.Alt, want.Alt}, "Az": {got.Az, want.Az}, "HA": {got.HA, want.HA}, "Dec": {got.Dec, want.Dec},
				"Airmass": {got.Airmass, want.Airmass}, "MoonSep": {got.MoonSep, want.MoonSep},
				"SunSep": {got.SunSep, want.SunSep}, "Sky": {got.Sky, want.Sky}, "Mag": {got.Mag, want.Mag},
			} {
				a, b := pair[0], pair[1]
				if len(a) != len(b) {
					t.Fatalf("workers %d: target %d %s has %d values, want %d", workers, i, name, len(a), len(b))
				}
				for k := range a {
					if a[k] != b[k] && !(math.IsNaN(float64(a[k])) && math.IsNaN(float64(b[k]))) {
						t.Fatalf("workers %d: target %d %s[%d] = %v, want %v", workers, i, name, k, a[k], b[k])
					}
				}
			}
		}
	}
}

// TestEvaluateAllMatchesEvaluate: EvaluateAll's visibilities (one
// allocation per chunk) equal Evaluate's one by one, for several worker
// counts, mixed requests and a nil track; and each visibility's steps are
// its own (writing one does not change a neighbour's).
func TestEvaluateAllMatchesEvaluate(t *testing.T) {
	site := benchSite(t)
	start := time.Date(2026, 12, 24, 17, 0, 0, 0, time.UTC)
	g, err := NewGrid(site, start, start.Add(6*time.Hour), time.Minute, Options{})
	if err != nil {
		t.Fatal(err)
	}
	rng := rand.New(rand.NewPCG(5, 6))
	targets := make([]*Target, 53)
	reqs := make([]Request, len(targets))
	loose := &Set{MaxAirmass: 3, Darkness: DarkCivil}
	for i := range targets {
		st, _ := ephem.NewStar(rng.Float64()*360, -30+rng.Float64()*120, 0, 0)
		targets[i] = &Target{Star: &st}
		reqs[i] = Request{Set: fullSet(), Exposure: 300 * time.Second}
		if i%3 == 0 {
			reqs[i].Set = loose
		}
	}
	tracks, _ := g.TrackAll(targets, 0)
	tracks[17] = nil
	for _, workers := range []int{1, 2, 3} {
		vis := g.EvaluateAll(tracks, reqs, workers)
		for i := range tracks {
			if tracks[i] == nil {
				if vis[i] != nil {
					t.Errorf("workers %d: a visibility for the nil track", workers)
				}
				continue
			}
			if want := g.Evaluate(tracks[i], reqs[i]); !reflect.DeepEqual(vis[i], want) {
				t.Fatalf("workers %d: visibility %d differs from Evaluate's", workers, i)
			}
		}
		v := vis[4]
		before := append([]Reason(nil), vis[5].Reason...)
		v.Reason = append(v.Reason, ReasonClosure) // full: must not write into vis[5]
		if !reflect.DeepEqual(vis[5].Reason, before) {
			t.Fatalf("workers %d: writing one visibility changed its neighbour", workers)
		}
	}
}
