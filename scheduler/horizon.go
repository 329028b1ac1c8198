package scheduler

import (
	"runtime"
	"time"

	"github.com/nightloom/nightloom/constraints"
)

// HorizonInput asks for plans of several consecutive nights.
type HorizonInput struct {
	Site   *Site
	Blocks []Block
	// First is the civil date of the first night; Nights how many.
	First  time.Time
	Nights int
	// Step is the grid step (default 2 min: a week-ahead plan does not
	// need the one-night default of 1 min).
	Step     time.Duration
	Closures []Closure
	NoSky    bool
	// Options for every night. Zero Iterations, ConvergeIterations and
	// Budget default to HorizonIterations, HorizonConvergeIterations and
	// 150 ms per night here: a night's search is cut by iterations, so its
	// time follows the night's size, and ends early once it stops gaining
	// (the budget is a ceiling that a loaded machine may reach).
	Options Options
}

// Per-night search of a horizon. Profiled on testdata/scheduler's
// horizon2000 (2000 blocks x 30 nights): the constructive plans reach 99.7
// % of what 100 iterations per night reach, 200 add another 0.3 % at twice
// the search's time; a plan of many nights is refined night by night by
// Replan anyway.
const (
	HorizonIterations         = 100
	HorizonConvergeIterations = 30
)

// NightPlan is one night of a horizon: its problem (the blocks with
// frames left that night; Assignment.Block indexes Problem.Blocks) and
// its plan.
type NightPlan struct {
	Date    time.Time
	Problem *Problem
	Plan    *Plan
}

// Horizon plans each night in turn, the frames planned on one night
// counting as done on the next (a plan, not a promise: replan each night
// from what was really done). Urgency comes from one lookahead over the
// horizon plus Options.LookaheadNights. Grids, tracks and visibility of
// later nights are computed concurrently while earlier ones are planned,
// at most Options.Workers nights at a time.
func Horizon(in HorizonInput) ([]NightPlan, error) {
	o := in.Options
	if o.Iterations == 0 {
		o.Iterations = HorizonIterations
	}
	if o.ConvergeIterations == 0 {
		o.ConvergeIterations = HorizonConvergeIterations
	}
	if o.Budget == 0 {
		o.Budget = 150 * time.Millisecond
	}
	o = o.withDefaults()
	workers := o.Workers
	if workers <= 0 {
		workers = runtime.GOMAXPROCS(0)
	}
	step := in.Step
	if step <= 0 {
		step = 2 * time.Minute
	}
	if err := checkInput(&Input{Site: in.Site, Grid: &constraints.Grid{}, Blocks: in.Blocks}); err != nil {
		return nil, err
	}
	la, err := NewLookahead(in.Site, in.Blocks, in.First, in.Nights+o.LookaheadNights-1, LookaheadStep, workers, o.Cancel)
	if err != nil {
		return nil, err
	}
	dark := WeakestDarkness(in.Blocks)
	done := make([]int, len(in.Blocks))
	for i := range in.Blocks {
		done[i] = in.Blocks[i].FramesDone
	}

	// The heavy part of each night (grid, tracks, visibility and the
	// continuous intervals with their refined edges), computed ahead by a
	// bounded pool while earlier nights are solved.
	type nightData struct {
		grid   *constraints.Grid
		idx    []int // blocks of that night (global indices)
		tracks []*constraints.Track
		vis    []*constraints.Visibility
		iv     [][]constraints.Interval
		err    error
	}
	results := make([]chan nightData, in.Nights)
	for k := range results {
		results[k] = make(chan nightData, 1)
	}
	sem := make(chan struct{}, workers)
	// Which blocks to evaluate is decided when a night's job starts: the
	// blocks with frames left after the nights planned so far and a usable
	// window that night (the lookahead's coarse check).
	launch := func(k int, left []bool) {
		sem <- struct{}{}
		go func() {
			defer func() { <-sem }()
			day := in.First.AddDate(0, 0, k)
			var nd nightData
			nd.grid, nd.err = NightGrid(in.Site.Site, day.Year(), day.Month(), day.Day(), dark, step,
				constraints.Options{NoSkyBrightness: in.NoSky})
			if nd.err == nil {
				var bl []Block
				for i := range in.Blocks {
					if left[i] && la.Usable(i, k) {
						nd.idx = append(nd.idx, i)
						bl = append(bl, in.Blocks[i])
					}
				}
				nd.tracks, nd.vis = visibilities(nd.grid, bl, 1, o.Cancel)
				nd.iv = blockIntervals(nd.grid, bl, nd.tracks, nd.vis, 1, o.Cancel)
				// The edges' one-step grids are not needed again for this
				// night's plan: keeping them for 30 nights would hold (and
				// make the collector scan) about 12 KB per block-night.
				nd.grid.ReleasePointCache()
			}
			results[k] <- nd
		}()
	}
	leftNow := func() []bool {
		l := make([]bool, len(in.Blocks))
		for i := range in.Blocks {
			l[i] = done[i] < in.Blocks[i].FramesWanted || in.Blocks[i].Cadence != nil
		}
		return l
	}
	next := 0
	for ; next < in.Nights && next < workers; next++ {
		launch(next, leftNow())
	}
	var out []NightPlan
	for k := 0; k < in.Nights; k++ {
		nd := <-results[k]
		if next < in.Nights {
			launch(next, leftNow())
			next++
		}
		day := in.First.AddDate(0, 0, k)
		if nd.err != nil {
			out = append(out, NightPlan{Date: day})
			continue
		}
		blocks := make([]Block, len(nd.idx))
		for j, i := range nd.idx {
			blocks[j] = in.Blocks[i]
			blocks[j].FramesDone = min(done[i], blocks[j].FramesWanted)
		}
		var closures []Closure
		for _, c := range in.Closures {
			if c.Start.Before(nd.grid.End()) && c.End.After(nd.grid.Start) {
				closures = append(closures, c)
			}
		}
		ch := la.Chances(k, o.LookaheadNights, nd.idx)
		p, err := newProblem(Input{Site: in.Site, Grid: nd.grid, Blocks: blocks, Closures: closures,
			Chances: ch, Options: o}, nd.tracks, nd.vis, nd.iv)
		if err != nil {
			return nil, err
		}
		pl := Solve(p)
		for _, a := range pl.Assignments {
			done[nd.idx[a.Block]] += a.Frames
		}
		out = append(out, NightPlan{Date: day, Problem: p, Plan: pl})
	}
	return out, nil
}
