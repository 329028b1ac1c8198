package constraints

import (
	"math/rand/v2"
	"testing"
	"time"

	"github.com/nightloom/nightloom/ephem"
)

// BenchmarkTrackStar: trackStar alone, 100 fixed targets on one 720-step
// grid, the tracks reused (their memory stays in cache): the arithmetic
// of a (target, step) cell without allocation or memory traffic.
func BenchmarkTrackStar(b *testing.B) {
	site := benchSite(b)
	start := time.Date(2026, 12, 24, 17, 0, 0, 0, time.UTC)
	rng := rand.New(rand.NewPCG(1, 2))
	for _, mode := range []struct {
		name  string
		opts  Options
		exact bool
	}{{"sky", Options{}, false}, {"no-sky", Options{NoSkyBrightness: true}, false}, {"no-sky-exact", Options{NoSkyBrightness: true}, true}} {
		g, err := NewGrid(site, start, start.Add(12*time.Hour), time.Minute, mode.opts)
		if err != nil {
			b.Fatal(err)
		}
		stars := make([]*ephem.Star, 100)
		for i := range stars {
			st, _ := ephem.NewStar(rng.Float64()*360, -30+rng.Float64()*120, 0, 0)
			stars[i] = &st
		}
		tr, _ := g.Track(&Target{Star: stars[0]})
		refresh := g.starRefreshSteps()
		b.Run(mode.name, func(b *testing.B) {
			cpu0 := processCPU()
			for b.Loop() {
				for _, st := range stars {
					if mode.exact {
						g.trackStarExact(tr, st, refresh)
					} else {
						g.trackStar(tr, st, refresh)
					}
				}
			}
			b.ReportMetric(float64((processCPU()-cpu0).Nanoseconds())/float64(b.N)/float64(len(stars)*g.N), "cpu-ns/target-step")
		})
	}
}
