package scheduler

import (
	"fmt"
	"time"

	"github.com/nightloom/nightloom/constraints"
)

// NetworkHorizonInput asks for network plans of consecutive nights.
// Network's sites need no Grid (one is built per site and night); their
// closures apply on every night, their executed runs and Network.From on
// the first night only.
type NetworkHorizonInput struct {
	Network NetworkInput
	// First is the civil date of the first night; Nights how many.
	First  time.Time
	Nights int
	// Step is the grid step (default 2 min, as Horizon).
	Step  time.Duration
	NoSky bool
}

// NetworkNight is one night of a network horizon.
type NetworkNight struct {
	Date time.Time
	Plan *NetworkPlan
}

// NetworkHorizon plans the network's nights in turn, as Horizon does for
// one site: each civil date's nights of all member sites are planned
// jointly by SolveNetwork, and the frames planned on one night count as
// done on the next (a plan, not a promise: replan each night from what
// was really done). There is no urgency lookahead across the network yet.
func NetworkHorizon(in NetworkHorizonInput) ([]NetworkNight, error) {
	if in.Nights <= 0 {
		return nil, fmt.Errorf("%w: %d nights", ErrNetwork, in.Nights)
	}
	step := in.Step
	if step <= 0 {
		step = 2 * time.Minute
	}
	blocks := append([]NetworkBlock(nil), in.Network.Blocks...)
	plain := make([]Block, len(blocks))
	for g := range blocks {
		plain[g] = blocks[g].Block
	}
	dark := WeakestDarkness(plain)
	var out []NetworkNight
	for n := 0; n < in.Nights; n++ {
		day := in.First.AddDate(0, 0, n)
		ni := in.Network
		ni.Blocks = append([]NetworkBlock(nil), blocks...)
		ni.Sites = append([]NetworkSite(nil), in.Network.Sites...)
		if n > 0 {
			ni.From = time.Time{}
		}
		for k := range ni.Sites {
			s := &ni.Sites[k]
			if n > 0 {
				s.Executed = nil
			}
			if s.Site == nil || s.Site.Site == nil {
				return nil, fmt.Errorf("%w: site %q: no site", ErrNetwork, s.Name)
			}
			g, err := NightGrid(s.Site.Site, day.Year(), day.Month(), day.Day(), dark, step,
				constraints.Options{NoSkyBrightness: in.NoSky})
			if err != nil {
				return nil, fmt.Errorf("site %q, night %s: %w", s.Name, day.Format(time.DateOnly), err)
			}
			s.Grid = g
		}
		pl, err := SolveNetwork(ni)
		if err != nil {
			return nil, err
		}
		out = append(out, NetworkNight{Date: day, Plan: pl})
		ids := map[string]int{}
		for g := range blocks {
			blocks[g].FramesDone += pl.Frames[g]
			ids[blocks[g].ID] = g
		}
		for _, s := range ni.Sites {
			for _, a := range s.Executed {
				blocks[ids[a.ID]].FramesDone += a.Frames
			}
		}
	}
	return out, nil
}
