package scheduler

import (
	"fmt"
	"math"
	"runtime"
	"slices"
	"sort"
	"time"

	"github.com/nightloom/nightloom/constraints"
)

// A network is several sites sharing one queue: each block is done once,
// at the member site that serves it best, its frames shared across the
// sites (never more than it still wants in total).
//
// # Method
//
// SolveNetwork prepares one Problem per site over the blocks that site may
// and can take (a block a site cannot do gets no visibility there), then
// improves the network's plan by block-coordinate ascent (Gauss-Seidel
// iteration; Bertsekas, Nonlinear Programming, 2nd ed. 1999, sec. 2.7)
// on the shared frame budgets, with a relocation move as in the
// large-neighbourhood search of Ropke & Pisinger (2006, Transportation
// Science 40, 455) for several vehicles:
//
//  1. Start: every block is given to the eligible site where its best
//     quality of the night is highest (ties: the earlier site), and each
//     site is planned alone on its share with Solve. This is the
//     "separate" plan that NetworkPlan.Separate reports.
//  2. Coordinate steps: site after site, re-solve that site with every
//     block it can do, capped at the frames left once the other sites'
//     current plans are counted (the other sites held fixed), warm-started
//     from its current plan; keep the new plan when the network objective
//     does not drop. A block one site could not fit flows to another.
//  3. Relocation: a block planned at site s that another site t sees at a
//     better quality is taken out of s (s re-solved without it, so its
//     time refills) and offered to t (t re-solved with the frames freed);
//     kept when the network objective rises. This is the move coordinate
//     steps alone cannot make: s never gives up a block for t's sake.
//
// Steps 2 and 3 form a round; rounds repeat (NetworkInput.Rounds) until one
// changes nothing. It is joint because every step is judged by the
// network's objective, and every site's cap changes with what the others
// do, rather than each site being planned once, in turn, on what the
// previous ones left.
//
// The network objective is the sum over sites of the plans' weighted
// exposure and cadence points, plus the completion bonus of every block
// whose frames over all sites reach what it still wants (counted once).
// A cadence block may be split across sites: each site's runs form their
// own series on the block's rhythm, so a light curve hands over as the
// Earth turns. A run shorter than MinRun stays allowed only when the
// network completes its block.

// Capability is what a network site's telescope can do: the smallest set
// that decides whether a block can run there. Nil Filters means the wheel
// is not described (any filter); ApertureMM 0 means unknown (a block that
// needs an aperture then cannot run). The pixel scale is the site's
// (constraints.Site.PixelScaleArcsec).
type Capability struct {
	Filters    []string
	ApertureMM float64
}

// Needs are what a network block asks of a telescope beyond its filter.
// Zero fields ask nothing.
type Needs struct {
	MinApertureMM float64
	// MinPixelScaleArcsec and MaxPixelScaleArcsec bound the site's pixel
	// scale (arcsec per pixel).
	MinPixelScaleArcsec, MaxPixelScaleArcsec float64
}

// NetworkSite is one member of a network: its site and night grid, its
// closures and runs executed tonight (Assignment.ID names the block;
// Block is ignored), and its capability.
type NetworkSite struct {
	Name       string
	Site       *Site
	Grid       *constraints.Grid
	Closures   []Closure
	Executed   []Assignment
	Capability Capability
}

// NetworkBlock is a block queued for the network: the sites allowed to
// take it (empty: every site) and what it needs of a telescope. Its
// FramesDone counts frames kept before tonight at any site.
type NetworkBlock struct {
	Block
	Sites []string
	Needs Needs
}

// NetworkInput is a network planning call. From is the common start (zero:
// each site's grid start).
type NetworkInput struct {
	Sites    []NetworkSite
	Blocks   []NetworkBlock
	From     time.Time
	Programs []Program
	// Options for every site's search. Iterations and Budget apply to each
	// site's first plan; a coordinate step's re-solve runs a third of them,
	// one inside a relocation a fifteenth (both warm-started).
	Options Options
	// Rounds of coordinate steps and relocations (default 3).
	Rounds int
	// Moves is the most relocations tried per round (default 4 per site).
	Moves int
}

// SitePlan is one site's part of a network plan. Problem is the site's
// problem with the frames the other sites take removed (Plan validates
// against it); Blocks maps its block indices to NetworkInput.Blocks.
type SitePlan struct {
	Name    string
	Problem *Problem
	Plan    *Plan
	Blocks  []int
}

// NetworkPlan is the network's plan over a common interval.
type NetworkPlan struct {
	Sites []SitePlan
	// Frames planned per network block, summed over the sites.
	Frames []int
	// Unplaced lists every block with frames left that no site plans, and
	// why, site by site.
	Unplaced []NetworkUnplaced
	// Objective is the network objective (package doc of SolveNetwork);
	// Separate that of the starting plan (each block at its best-quality
	// site, every site planned alone).
	Objective, Separate float64
	// Rounds run, relocations tried and kept, coordinate steps kept.
	Rounds, Moves, MovesKept, StepsKept int
}

// SiteWhy says why a site does not take a block.
type SiteWhy uint8

// Reasons a network site does not take a block.
const (
	// NotAllowed: the block names other sites.
	NotAllowed SiteWhy = iota + 1
	// LacksFilter: the site's wheel has not the block's filter.
	LacksFilter
	// ApertureTooSmall: the telescope is smaller than the block needs.
	ApertureTooSmall
	// PixelScaleOutside: the site's pixel scale is outside the block's range.
	PixelScaleOutside
	// SiteNeverObservable, SiteWindowTooShort, SiteLostToHigherValue: as
	// Why, at that site.
	SiteNeverObservable
	SiteWindowTooShort
	SiteLostToHigherValue
)

func (w SiteWhy) String() string {
	switch w {
	case NotAllowed:
		return "not among the block's sites"
	case LacksFilter:
		return "lacks the filter"
	case ApertureTooSmall:
		return "aperture too small"
	case PixelScaleOutside:
		return "pixel scale outside the block's range"
	case SiteNeverObservable:
		return NeverObservable.String()
	case SiteWindowTooShort:
		return WindowTooShort.String()
	case SiteLostToHigherValue:
		return LostToHigherValue.String()
	}
	return "unknown"
}

// SiteReason is one site's reason for not taking a block.
type SiteReason struct {
	Site       string
	Why        SiteWhy
	Constraint constraints.Reason // for SiteNeverObservable
}

// NetworkUnplaced is a block no site plans, with every site's reason.
type NetworkUnplaced struct {
	Block int
	ID    string
	Sites []SiteReason
}

// ErrNetwork marks an invalid network input.
var ErrNetwork = fmt.Errorf("%w: network", ErrInput)

// CanTake says whether site s may and can take block b, and if not why.
func CanTake(s *NetworkSite, b *NetworkBlock) (bool, SiteWhy) {
	if len(b.Sites) > 0 && !slices.Contains(b.Sites, s.Name) {
		return false, NotAllowed
	}
	if s.Capability.Filters != nil && !slices.Contains(s.Capability.Filters, b.Filter) {
		return false, LacksFilter
	}
	if b.Needs.MinApertureMM > 0 && s.Capability.ApertureMM < b.Needs.MinApertureMM {
		return false, ApertureTooSmall
	}
	px := s.Site.PixelScaleArcsec
	if b.Needs.MinPixelScaleArcsec > 0 && !(px >= b.Needs.MinPixelScaleArcsec) ||
		b.Needs.MaxPixelScaleArcsec > 0 && !(px <= b.Needs.MaxPixelScaleArcsec) {
		return false, PixelScaleOutside
	}
	return true, 0
}

// netSite is one site's state in the search.
type netSite struct {
	in   *NetworkSite
	base *Problem // all frames available (those executed elsewhere removed)
	glob []int    // local block -> network block
	loc  []int    // network block -> local block, -1
	cur  *Problem // capped problem of sc
	sc   *sched
}

// network is the search's state.
type network struct {
	in     *NetworkInput
	sites  []*netSite
	rem    []int     // frames left per network block
	bonus  []float64 // completion bonus per network block
	minRun []int
	x      [][]int // frames planned per site and network block
	opts   Options // first solves
	re     Options // re-solves of coordinate steps
	mv     Options // re-solves inside a relocation
}

// SolveNetwork plans every site of a network jointly (see the method
// above). Errors: ErrNetwork for duplicate or empty site names, executed
// runs of unknown blocks or blocks the site cannot take; the errors of
// NewProblem.
func SolveNetwork(in NetworkInput) (*NetworkPlan, error) {
	nw, err := newNetwork(&in)
	if err != nil {
		return nil, err
	}
	out := &NetworkPlan{}
	nw.start()
	out.Separate = nw.objective()
	rounds := in.Rounds
	if rounds <= 0 {
		rounds = 3
	}
	moves := in.Moves
	if moves <= 0 {
		moves = 4 * len(nw.sites)
	}
	for r := 0; r < rounds && !cancelled(nw.opts.Cancel); r++ {
		out.Rounds++
		changed := false
		for k := range nw.sites {
			if nw.step(k) {
				out.StepsKept++
				changed = true
			}
		}
		tried, kept := nw.relocate(moves)
		out.Moves += tried
		out.MovesKept += kept
		if kept > 0 {
			changed = true
		}
		if !changed {
			break
		}
	}
	out.Objective = nw.objective()
	nw.finish(out)
	return out, nil
}

func newNetwork(in *NetworkInput) (*network, error) {
	if len(in.Sites) == 0 {
		return nil, fmt.Errorf("%w: no sites", ErrNetwork)
	}
	names := map[string]bool{}
	for i := range in.Sites {
		s := &in.Sites[i]
		if s.Name == "" || names[s.Name] {
			return nil, fmt.Errorf("%w: site name %q empty or given twice", ErrNetwork, s.Name)
		}
		if s.Site == nil || s.Site.Site == nil || s.Grid == nil {
			return nil, fmt.Errorf("%w: site %q: site and grid are required", ErrNetwork, s.Name)
		}
		names[s.Name] = true
	}
	ids := map[string]int{}
	for i := range in.Blocks {
		b := &in.Blocks[i]
		if _, ok := ids[b.ID]; ok {
			return nil, fmt.Errorf("%w %q: given twice", ErrBlock, b.ID)
		}
		ids[b.ID] = i
		for _, n := range b.Sites {
			if !names[n] {
				return nil, fmt.Errorf("%w %q: unknown site %q", ErrBlock, b.ID, n)
			}
		}
	}
	nb := len(in.Blocks)
	// Frames executed tonight at each site, per network block.
	execAt := make([][]int, len(in.Sites))
	execAll := make([]int, nb)
	for k := range in.Sites {
		execAt[k] = make([]int, nb)
		for _, a := range in.Sites[k].Executed {
			g, ok := ids[a.ID]
			if !ok {
				return nil, fmt.Errorf("%w: site %q: executed run of unknown block %q", ErrNetwork, in.Sites[k].Name, a.ID)
			}
			if ok, why := CanTake(&in.Sites[k], &in.Blocks[g]); !ok {
				return nil, fmt.Errorf("%w: site %q: executed run of block %q, which it cannot take (%v)", ErrNetwork, in.Sites[k].Name, a.ID, why)
			}
			execAt[k][g] += a.Frames
			execAll[g] += a.Frames
		}
	}
	o := in.Options
	nw := &network{in: in, rem: make([]int, nb), bonus: make([]float64, nb), minRun: make([]int, nb),
		x: make([][]int, len(in.Sites)), opts: o}
	nw.re = o
	if o.Iterations > 0 {
		nw.re.Iterations = max(1, o.Iterations/3)
	} else {
		nw.re.Iterations = DefaultIterations / 3
	}
	if o.Budget > 0 {
		nw.re.Budget = max(time.Millisecond, o.Budget/3)
	} else if o.Budget == 0 {
		nw.re.Budget = DefaultBudget / 3
	}
	nw.mv = nw.re
	nw.mv.Iterations = max(1, nw.re.Iterations/5)
	if nw.re.Budget > 0 {
		nw.mv.Budget = max(time.Millisecond, nw.re.Budget/5)
	}
	for g := range in.Blocks {
		b := &in.Blocks[g].Block
		nw.rem[g] = max(0, b.FramesWanted-b.FramesDone-execAll[g])
		nw.minRun[g] = max(1, b.MinRun)
	}
	for k := range in.Sites {
		s := &in.Sites[k]
		ns := &netSite{in: s, loc: make([]int, nb)}
		var blocks []Block
		for g := range in.Blocks {
			ns.loc[g] = -1
			if ok, _ := CanTake(s, &in.Blocks[g]); ok {
				ns.loc[g] = len(ns.glob)
				ns.glob = append(ns.glob, g)
				b := in.Blocks[g].Block
				// Frames kept tonight at other sites count as done here.
				b.FramesDone += execAll[g] - execAt[k][g]
				blocks = append(blocks, b)
			}
		}
		exec := make([]Assignment, len(s.Executed))
		for i, a := range s.Executed {
			a.Block = ns.loc[ids[a.ID]]
			exec[i] = a
		}
		p, err := NewProblem(Input{Site: s.Site, Grid: s.Grid, Blocks: blocks, Closures: s.Closures, Executed: exec,
			From: in.From, Programs: in.Programs, Options: o})
		if err != nil {
			return nil, fmt.Errorf("site %q: %w", s.Name, err)
		}
		ns.base = p
		for i, g := range ns.glob {
			nw.bonus[g] = p.bd[i].bonus // the same at every site: priority, urgency and share are the block's
		}
		nw.sites = append(nw.sites, ns)
		nw.x[k] = make([]int, nb)
	}
	return nw, nil
}

// capped returns a copy of p with taken[i] more frames of block i counted
// as done (the frames other sites plan).
func capped(p *Problem, taken []int) *Problem {
	q := *p
	q.Blocks = append([]Block(nil), p.Blocks...)
	q.bd = append([]bdat(nil), p.bd...)
	q.keep = nil
	for i, t := range taken {
		if t == 0 {
			continue
		}
		q.Blocks[i].FramesDone += t
		d := &q.bd[i]
		d.rem = max(0, d.rem-t)
		d.bonus = 0
		if d.rem > 0 {
			d.bonus = q.Options.CompletionBonus * d.w * float64(d.rem)
		}
	}
	return &q
}

// carry rebuilds the runs of old on q (the same site under other caps),
// dropping those beyond q's frames and whatever that breaks.
func carry(q *Problem, old *sched) *sched {
	sc := q.emptySched()
	if old != nil {
		for _, r := range old.runs {
			if sc.planned[r.b]+r.n <= q.bd[r.b].rem {
				q.insert(sc, len(sc.runs), r)
			}
		}
	}
	changed := map[int]bool{}
	for b := range q.Blocks {
		changed[b] = true
	}
	q.fixup(sc, make([]bool, len(sc.runs)+1), changed)
	return sc
}

// capsFor is what the other sites take of each of site k's blocks.
func (nw *network) capsFor(k int) []int {
	ns := nw.sites[k]
	taken := make([]int, len(ns.glob))
	for i, g := range ns.glob {
		for j := range nw.sites {
			if j != k {
				taken[i] += nw.x[j][g]
			}
		}
	}
	return taken
}

// set makes (q, sc) site k's current plan.
func (nw *network) set(k int, q *Problem, sc *sched) {
	ns := nw.sites[k]
	ns.cur, ns.sc = q, sc
	x := nw.x[k]
	clear(x)
	for i, n := range sc.planned {
		x[ns.glob[i]] = n
	}
}

// start is step 1: every block at its best-quality site, sites planned
// alone on their shares (concurrently).
func (nw *network) start() {
	owner := nw.bestSites()
	plans := make([]*sched, len(nw.sites))
	qs := make([]*Problem, len(nw.sites))
	workers := nw.opts.Workers
	if workers <= 0 {
		workers = runtime.GOMAXPROCS(0)
	}
	parallel(len(nw.sites), workers, func(k int) {
		ns := nw.sites[k]
		taken := make([]int, len(ns.glob))
		for i, g := range ns.glob {
			if owner[g] != k {
				taken[i] = nw.rem[g]
			}
		}
		q := capped(ns.base, taken)
		sc, _, _ := q.solve(nil, 0)
		plans[k], qs[k] = sc, q
	})
	for k := range nw.sites {
		nw.set(k, qs[k], plans[k])
	}
}

// bestSites gives every block to the eligible site with the highest best
// quality of the night (-1 when no site can take it).
func (nw *network) bestSites() []int {
	owner := make([]int, len(nw.rem))
	best := make([]float64, len(nw.rem))
	for g := range owner {
		owner[g], best[g] = -1, -1
	}
	for k, ns := range nw.sites {
		for i, g := range ns.glob {
			if q := ns.base.peakQuality(i); q > best[g] {
				owner[g], best[g] = k, q
			}
		}
	}
	return owner
}

// peakQuality is block b's best quality inside its intervals (0 when it
// has none).
func (p *Problem) peakQuality(b int) float64 {
	d := &p.bd[b]
	if len(d.iv) == 0 || d.rem <= 0 {
		return 0
	}
	return float64(d.q[d.peak])
}

// objective is the network objective of the current plans.
func (nw *network) objective() float64 {
	v := 0.0
	for _, ns := range nw.sites {
		for _, r := range ns.sc.runs {
			v += r.val
		}
	}
	for g, r := range nw.rem {
		if r > 0 && nw.total(g) >= r {
			v += nw.bonus[g]
		}
	}
	return v
}

func (nw *network) total(g int) int {
	n := 0
	for k := range nw.sites {
		n += nw.x[k][g]
	}
	return n
}

// consistent reports whether every run shorter than its block's MinRun
// belongs to a block the network completes.
func (nw *network) consistent() bool {
	for _, ns := range nw.sites {
		for _, r := range ns.sc.runs {
			g := ns.glob[r.b]
			if r.n < nw.minRun[g] && nw.total(g) < nw.rem[g] {
				return false
			}
		}
	}
	return true
}

// resolve re-solves site k against the others' current frames with the
// search options o, warm started from its plan, and returns the problem
// and plan without making them current.
func (nw *network) resolve(k int, o Options) (*Problem, *sched) {
	ns := nw.sites[k]
	q := capped(ns.base, nw.capsFor(k))
	q.Options = o
	sc, _, _ := q.solve(carry(q, ns.sc), 0)
	q.Options = ns.base.Options
	return q, sc
}

// snapshot and restore save and put back one site's state.
type siteSnap struct {
	q  *Problem
	sc *sched
}

func (nw *network) snap(k int) siteSnap       { return siteSnap{nw.sites[k].cur, nw.sites[k].sc} }
func (nw *network) restore(k int, s siteSnap) { nw.set(k, s.q, s.sc) }

// step is a coordinate step at site k; it reports whether the new plan
// was kept (and raised the objective).
func (nw *network) step(k int) bool {
	before := nw.objective()
	old := nw.snap(k)
	q, sc := nw.resolve(k, nw.re)
	nw.set(k, q, sc)
	if after := nw.objective(); after > before*(1+1e-12) && nw.consistent() {
		return true
	} else if after >= before && nw.consistent() {
		return false // as good: keep the newer plan, but it is no progress
	}
	nw.restore(k, old)
	return false
}

// relocation is a candidate move of block g from site s to site t, with
// its estimated gain.
type relocation struct {
	g, s, t int
	gain    float64
}

// relocate tries at most limit relocations, best estimated gain first.
func (nw *network) relocate(limit int) (tried, kept int) {
	var cands []relocation
	for s, ns := range nw.sites {
		// Mean quality of each planned block at s.
		qsum := map[int]float64{}
		for _, r := range ns.sc.runs {
			d := &ns.cur.bd[r.b]
			if d.w > 0 {
				qsum[r.b] += (r.val - d.point) / d.w
			}
		}
		for i, qf := range qsum {
			g := ns.glob[i]
			n := nw.x[s][g]
			if n == 0 {
				continue
			}
			mean := qf / float64(n)
			w := ns.base.bd[i].w
			for t, nt := range nw.sites {
				if t == s || nt.loc[g] < 0 {
					continue
				}
				// Every eligible site that sees the block is a candidate,
				// the ones that see it better first: a move that looks
				// worse for the block may free time for a better plan.
				if qt := nt.base.peakQuality(nt.loc[g]); qt > 0 {
					cands = append(cands, relocation{g: g, s: s, t: t, gain: w * float64(n) * (qt - mean)})
				}
			}
		}
	}
	sort.Slice(cands, func(i, j int) bool {
		if cands[i].gain != cands[j].gain {
			return cands[i].gain > cands[j].gain
		}
		return cands[i].g < cands[j].g || cands[i].g == cands[j].g && cands[i].t < cands[j].t
	})
	moved := map[int]bool{}
	for _, c := range cands {
		if tried >= limit || cancelled(nw.opts.Cancel) {
			break
		}
		if moved[c.g] || nw.x[c.s][c.g] == 0 {
			continue
		}
		tried++
		if nw.move(c) {
			kept++
			moved[c.g] = true
		}
	}
	return tried, kept
}

// move takes block c.g out of site c.s and offers its frames to c.t; it
// keeps the result when the network objective rises.
func (nw *network) move(c relocation) bool {
	before := nw.objective()
	os, ot := nw.snap(c.s), nw.snap(c.t)
	ns := nw.sites[c.s]
	// s without the block: its runs dropped, the time refilled.
	taken := nw.capsFor(c.s)
	i := ns.loc[c.g]
	taken[i] = nw.rem[c.g]
	q := capped(ns.base, taken)
	q.Options = nw.mv
	sc, _, _ := q.solve(carry(q, ns.sc), 0)
	q.Options = ns.base.Options
	nw.set(c.s, q, sc)
	// t with the frames freed; then s once more with what t left.
	qt, sct := nw.resolve(c.t, nw.mv)
	nw.set(c.t, qt, sct)
	qs, scs := nw.resolve(c.s, nw.mv)
	nw.set(c.s, qs, scs)
	if nw.objective() > before*(1+1e-12) && nw.consistent() {
		return true
	}
	nw.restore(c.s, os)
	nw.restore(c.t, ot)
	return false
}

// finish fills the plan from the search's state.
func (nw *network) finish(out *NetworkPlan) {
	nb := len(nw.rem)
	out.Frames = make([]int, nb)
	for g := range out.Frames {
		out.Frames[g] = nw.total(g)
	}
	why := make([][]SiteReason, nb)
	for k, ns := range nw.sites {
		// Each site's problem with the other sites' final frames: its plan
		// keeps every run (the totals hold), and validates against it.
		// (Should a run not carry over, the plan stays with the problem it
		// was made on, against which it is just as valid.)
		q := capped(ns.base, nw.capsFor(k))
		if sc := carry(q, ns.sc); len(sc.runs) == len(ns.sc.runs) {
			ns.cur, ns.sc = q, sc
		}
		pl := ns.cur.toPlan(ns.sc, "network", 0)
		pl.Objective.Value = pl.Objective.Weighted + pl.Objective.Cadence + pl.Objective.Bonus
		out.Sites = append(out.Sites, SitePlan{Name: ns.in.Name, Problem: ns.cur, Plan: pl, Blocks: ns.glob})
		// Reasons at this site for blocks no site plans: the site's own
		// explanation under its caps (which then hold every frame).
		local := map[int]Unplaced{}
		for _, u := range pl.Unplaced {
			local[ns.glob[u.Block]] = u
		}
		for g := 0; g < nb; g++ {
			if nw.rem[g] == 0 || out.Frames[g] > 0 {
				continue
			}
			sr := SiteReason{Site: ns.in.Name}
			if ok, w := CanTake(&nw.in.Sites[k], &nw.in.Blocks[g]); !ok {
				sr.Why = w
			} else if u, ok := local[g]; ok {
				sr.Why = SiteNeverObservable + SiteWhy(u.Why-NeverObservable)
				sr.Constraint = u.Constraint
			} else {
				sr.Why = SiteLostToHigherValue
			}
			why[g] = append(why[g], sr)
		}
	}
	for g := 0; g < nb; g++ {
		if why[g] != nil {
			out.Unplaced = append(out.Unplaced, NetworkUnplaced{Block: g, ID: nw.in.Blocks[g].ID, Sites: why[g]})
		}
	}
}

// networkValue recomputes a network plan's objective from its site plans
// and the input: the weighted exposure and points of every run, and the
// bonus of every block whose frames over the sites reach what it has left
// (frames wanted less done less executed anywhere). The check of tests and
// benchmarks.
func networkValue(in *NetworkInput, pl *NetworkPlan) float64 {
	v := 0.0
	frames := make([]int, len(in.Blocks))
	w := make([]float64, len(in.Blocks))
	bonusFrac := 0.0
	for _, sp := range pl.Sites {
		v += sp.Plan.Objective.Weighted + sp.Plan.Objective.Cadence
		for _, a := range sp.Plan.Assignments {
			if !a.Executed {
				frames[sp.Blocks[a.Block]] += a.Frames
			}
		}
		for i, g := range sp.Blocks {
			w[g] = sp.Problem.bd[i].w
		}
		bonusFrac = sp.Problem.Options.CompletionBonus
	}
	for g := range in.Blocks {
		b := &in.Blocks[g]
		left := b.FramesWanted - b.FramesDone
		for _, s := range in.Sites {
			for _, a := range s.Executed {
				if a.ID == b.ID {
					left -= a.Frames
				}
			}
		}
		if left > 0 && frames[g] >= left {
			v += bonusFrac * w[g] * float64(left)
		}
	}
	return v
}

// NetworkBound returns an upper bound on the network objective of every
// plan of in: the Lagrangian bound of BoundDP (Sousa & Wolsey 1992; the
// subgradient method of Held, Wolfe & Crowder 1974) with one frame-budget
// multiplier per network block shared by all sites,
//
//	L(mu) = sum_b mu_b rem_b + sum_sites max over sequences of runs at the site of
//	        sum_runs (val + (bonus_b/rem_b - mu_b) n - rho_w(run)) + sum_windows rho_w,
//
// each site's inner maximum the dynamic programming of BoundDP. The
// network's relaxations on top of BoundDP's: one run shorter than MinRun
// per block at every site (a site's share may end in one), and the
// completion bonus spread over the frames wherever the sites together can
// hold the frames left. lb (a known plan's objective) steers the Polyak steps; iters
// bounds the subgradient iterations (0: 120).
func NetworkBound(in NetworkInput, lb float64, iters int) (float64, error) {
	nw, err := newNetwork(&in)
	if err != nil {
		return 0, err
	}
	if iters <= 0 {
		iters = 120
	}
	return nw.bound(lb, iters), nil
}

func (nw *network) bound(lb float64, iters int) float64 {
	type siteDP struct {
		x    *lagDP
		glob []int     // active block -> network block
		cad  []float64 // cadence window multipliers
		mu   []float64
		nu   []float64 // at most one run shorter than MinRun per block and site
	}
	possible := make([]int, len(nw.rem))
	for _, ns := range nw.sites {
		for i, g := range ns.glob {
			possible[g] += ns.base.framesPossible(i)
		}
	}
	var ss []siteDP
	for _, ns := range nw.sites {
		q := *ns.base
		q.bd = append([]bdat(nil), ns.base.bd...)
		for i := range q.bd {
			// A site's share may end in a run shorter than MinRun even when
			// the block's frames left are no more than MinRun: then let
			// the DP see a budget above MinRun, so that it builds runs of
			// every length, short ones counted by nu (one per site).
			if d := &q.bd[i]; d.rem > 0 && d.rem <= d.minRun {
				d.rem = d.minRun + 1
			}
		}
		x := newLagDP(&q)
		sd := siteDP{x: x, glob: make([]int, len(x.active)), cad: make([]float64, x.nCad),
			mu: make([]float64, len(x.active)), nu: make([]float64, len(x.active))}
		for a, b := range x.active {
			g := ns.glob[b]
			sd.glob[a] = g
			x.bpf[a] = 0
			if r := nw.rem[g]; r > 0 && possible[g] >= r {
				x.bpf[a] = nw.bonus[g] / float64(r)
			}
		}
		ss = append(ss, sd)
	}
	mu := make([]float64, len(nw.rem))
	gmu := make([]float64, len(nw.rem))
	gcad := make([][]float64, len(ss))
	gnu := make([][]float64, len(ss))
	for k := range ss {
		gcad[k] = make([]float64, len(ss[k].cad))
		gnu[k] = make([]float64, len(ss[k].nu))
	}
	best := math.Inf(1)
	theta, stall := 1.0, 0
	for it := 0; it < iters; it++ {
		L := 0.0
		for g, r := range nw.rem {
			L += mu[g] * float64(r)
			gmu[g] = float64(r)
		}
		for k := range ss {
			sd := &ss[k]
			if len(sd.x.active) == 0 {
				continue
			}
			for a, g := range sd.glob {
				sd.mu[a] = mu[g]
			}
			val, frames, shorts, starts := sd.x.solve(sd.mu, sd.nu, sd.cad)
			L += val
			for a, g := range sd.glob {
				gmu[g] -= float64(frames[a])
				L += sd.nu[a]
				gnu[k][a] = 1 - float64(shorts[a])
			}
			for j, n := range starts {
				L += sd.cad[j] * sd.x.cRHS[j]
				gcad[k][j] = sd.x.cRHS[j] - float64(n)
			}
		}
		if math.IsInf(best, 1) || L < best-1e-9*math.Abs(best) {
			best, stall = L, 0
		} else if stall++; stall >= 6 {
			theta, stall = theta/2, 0
		}
		norm := 0.0
		for g := range mu {
			if mu[g] > 0 || gmu[g] < 0 {
				norm += gmu[g] * gmu[g]
			}
		}
		for k := range ss {
			for j := range ss[k].cad {
				if ss[k].cad[j] > 0 || gcad[k][j] < 0 {
					norm += gcad[k][j] * gcad[k][j]
				}
			}
			for a := range ss[k].nu {
				if ss[k].nu[a] > 0 || gnu[k][a] < 0 {
					norm += gnu[k][a] * gnu[k][a]
				}
			}
		}
		if norm == 0 || theta < 1e-3 {
			break
		}
		step := theta * math.Max(L-lb, 1e-6*L) / norm
		for g := range mu {
			mu[g] = math.Max(0, mu[g]-step*gmu[g])
		}
		for k := range ss {
			for j := range ss[k].cad {
				ss[k].cad[j] = math.Max(0, ss[k].cad[j]-step*gcad[k][j])
			}
			for a := range ss[k].nu {
				ss[k].nu[a] = math.Max(0, ss[k].nu[a]-step*gnu[k][a])
			}
		}
	}
	return best
}
