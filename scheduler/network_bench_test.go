package scheduler

import (
	"fmt"
	"testing"
	"time"
)

var sinkNetwork *NetworkPlan

// BenchmarkNetwork plans generated networks (genNetwork: invented sites on
// several continents, 200 blocks generated per site, load 1.5 nights of
// exposure per site) over the night of 2027-02-10 with the default search
// options. The timed call is the whole SolveNetwork: visibility at every
// site, the separate start and the joint rounds. Metrics:
//
//   - joint/separate: the joint objective over that of the separate plan
//     of the same run (each block given to its best-quality site, every
//     site planned alone by Solve on its share);
//   - joint/bound: the joint objective over NetworkBound (computed once
//     after the timed loop, steered by the plan's objective), where it
//     is affordable.
func BenchmarkNetwork(b *testing.B) {
	for _, nSites := range []int{2, 5, 10} {
		b.Run(fmt.Sprintf("sites=%d/blocks=%d", nSites, 200*nSites), func(b *testing.B) {
			in := genNetwork(b, 21, nSites, 200, 1, 1.5)
			in.Options = Options{Seed: 1}
			b.ReportAllocs()
			b.ResetTimer()
			var pl *NetworkPlan
			for i := 0; i < b.N; i++ {
				var err error
				pl, err = SolveNetwork(in)
				if err != nil {
					b.Fatal(err)
				}
			}
			b.StopTimer()
			sinkNetwork = pl
			b.ReportMetric(pl.Objective/pl.Separate, "joint/separate")
			if nSites <= 5 {
				bound, err := NetworkBound(in, pl.Objective, 0)
				if err != nil {
					b.Fatal(err)
				}
				b.ReportMetric(pl.Objective/bound, "joint/bound")
			}
			b.ReportMetric(float64(len(pl.Unplaced)), "unplaced")
			b.ReportMetric(float64(pl.MovesKept), "moves-kept")
		})
	}
}

var sinkNights []NetworkNight

// BenchmarkNetworkHorizon plans 10 sites x 2000 blocks (200 generated per
// site for a 7-night load of 1.5) over 7 nights with NetworkHorizon, 400
// iterations or 150 ms per site's first plan (Horizon's defaults).
// joint/separate is the sum over the nights of both objectives.
func BenchmarkNetworkHorizon(b *testing.B) {
	in := genNetwork(b, 31, 10, 200, 7, 1.5)
	in.Options = Options{Seed: 1, Iterations: 400, Budget: 150 * time.Millisecond}
	b.ReportAllocs()
	b.ResetTimer()
	var nights []NetworkNight
	for i := 0; i < b.N; i++ {
		var err error
		nights, err = NetworkHorizon(NetworkHorizonInput{Network: in, First: netNight, Nights: 7, NoSky: true})
		if err != nil {
			b.Fatal(err)
		}
	}
	b.StopTimer()
	sinkNights = nights
	joint, sep := 0.0, 0.0
	for _, n := range nights {
		joint += n.Plan.Objective
		sep += n.Plan.Separate
	}
	b.ReportMetric(joint/sep, "joint/separate")
}
