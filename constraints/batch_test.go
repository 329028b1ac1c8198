package constraints

import (
	"errors"
	"math"
	"math/rand/v2"
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
