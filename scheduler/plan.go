package scheduler

import (
	"math"
	"time"

	"github.com/nightloom/nightloom/constraints"
	"github.com/nightloom/nightloom/ephem"
)

// toPlan turns a timeline into a Plan: executed runs first, then the
// planned ones with their pointing, conditions and overheads, the unplaced
// blocks with reasons, and the objective.
func (p *Problem) toPlan(sc *sched, solver string, iters int) *Plan {
	pl := &Plan{Start: p.From, End: p.Grid.End(), Solver: solver, Iterations: iters}
	for _, a := range p.Executed {
		a.Executed = true
		pl.Assignments = append(pl.Assignments, a)
	}
	for k := range sc.runs {
		pl.Assignments = append(pl.Assignments, p.assignment(sc, k))
	}
	pl.Objective = p.objective(sc)
	for _, a := range p.Executed {
		pl.Objective.Executed += a.Value
	}
	pl.Unplaced = p.unplaced(sc)
	pl.Cadence = p.cadenceReports(sc)
	pl.Charged = p.charges(pl)
	for _, c := range pl.Charged {
		pl.Objective.OverheadS += c.Overheads.Seconds()
	}
	return pl
}

// charges sums the time the plan's runs (not the executed ones) charge to
// each program: exposure, and overheads (the setup before the run, and
// the readouts, dithers and flips inside it; idle time is nobody's).
func (p *Problem) charges(pl *Plan) []Charge {
	idx := map[string]int{}
	var out []Charge
	for _, pr := range p.Programs {
		if _, ok := idx[pr.Name]; !ok && pr.Name != "" {
			idx[pr.Name] = len(out)
			out = append(out, Charge{Program: pr.Name, Allocation: pr.Allocation, Used: pr.Used, Share: p.fairShare(pr.Name)})
		}
	}
	for i := range pl.Assignments {
		a := &pl.Assignments[i]
		if a.Executed {
			continue
		}
		name := p.Blocks[a.Block].Program
		k, ok := idx[name]
		if !ok {
			k = len(out)
			idx[name] = k
			out = append(out, Charge{Program: name, Share: p.Share[a.Block]})
		}
		exp := time.Duration(a.Frames) * p.Blocks[a.Block].Exposure
		s := a.Spent
		out[k].Exposure += exp
		out[k].Overheads += a.End.Sub(a.Start) - exp + s.Slew + s.Settle + s.FilterChange + s.Focus + s.Acquisition
	}
	// Blocks without a program last.
	if k, ok := idx[""]; ok && k != len(out)-1 {
		c := out[k]
		out = append(append(out[:k], out[k+1:]...), c)
	}
	return out
}

// objective sums a timeline's parts.
func (p *Problem) objective(sc *sched) Objective {
	var o Objective
	for _, r := range sc.runs {
		pt := p.bd[r.b].point
		o.Weighted += r.val - pt
		o.Cadence += pt
		o.Raw += (r.val - pt) / (p.Urgency[r.b] * p.Share[r.b])
		o.ExposureS += float64(r.n) * p.bd[r.b].exp
	}
	for b, n := range sc.planned {
		if d := &p.bd[b]; d.rem > 0 && n >= d.rem {
			o.Bonus += d.bonus
			o.Completed++
		}
	}
	o.Value = o.Weighted + o.Cadence + o.Bonus
	return o
}

// assignment materialises runs[k].
func (p *Problem) assignment(sc *sched, k int) Assignment {
	r := &sc.runs[k]
	b := r.b
	blk := &p.Blocks[b]
	tr := p.Tracks[b]
	prev := p.prevOf(sc, k)
	base := p.anchor.free
	if k > 0 {
		base = sc.runs[k-1].e
	}
	su := p.setup(prev, b, r.s)
	a := Assignment{Block: b, ID: blk.ID, Start: p.abs(r.s), End: p.abs(r.e), Frames: r.n, Value: r.val}
	for _, x := range p.frameStarts(r) {
		a.FrameStarts = append(a.FrameStarts, p.abs(x))
	}
	if r.flipAt >= 0 {
		a.Flip = p.abs(r.flipAt)
		a.FlipBefore = r.flipBefore
	}
	i := p.stepAt(r.s)
	j := p.stepAt(r.e - 1e-6)
	lst := p.Grid.Local[i].LAST
	ha := p.haAt(b, r.s)
	a.Pointing = Pointing{HADeg: math.Remainder(ha, 2*math.Pi) * ephem.Rad2Deg, DecDeg: float64(tr.Dec[i]) * ephem.Rad2Deg,
		RADeg:  ephem.NormAngle(lst-ha) * ephem.Rad2Deg,
		AltDeg: float64(tr.Alt[i]) * ephem.Rad2Deg, AzDeg: float64(tr.Az[i]) * ephem.Rad2Deg,
		PierWest: r.side0 == sideWest}
	if tr.RateRA != nil {
		a.Pointing.RateRAArcsecMin, a.Pointing.RateDecArcsecMin = float64(tr.RateRA[i]), float64(tr.RateDec[i])
	}
	qs := 0.0
	for _, x := range p.frameStarts(r) {
		qs += float64(p.bd[b].q[p.stepAt(x+p.bd[b].exp/2)])
	}
	a.Conditions = Conditions{AirmassStart: float64(tr.Airmass[i]), AirmassEnd: float64(tr.Airmass[j]),
		MeanQuality: qs / float64(max(1, r.n)),
		MoonSepDeg:  float64(tr.MoonSep[i]) * ephem.Rad2Deg, SunSepDeg: float64(tr.SunSep[i]) * ephem.Rad2Deg,
		SkyMag: float64(tr.Sky[i])}
	sec := func(x float64) time.Duration { return time.Duration(math.Round(x * 1e9)) }
	a.Spent = Spent{Slew: sec(su.slew), Settle: sec(su.settle), FilterChange: sec(math.Max(0, su.filter-su.slew-su.settle)),
		Focus: sec(su.focus), Acquisition: sec(su.acq)}
	a.Spent.Idle = sec(math.Max(0, r.s-base-su.total()))
	if r.flipAt >= 0 {
		starts := p.frameStarts(r)
		prevEnd := starts[r.flipBefore-1] + p.bd[b].frame
		a.Spent.Flip = sec(starts[r.flipBefore] - prevEnd)
	}
	return a
}

// unplaced explains every block with frames left and no run.
func (p *Problem) unplaced(sc *sched) []Unplaced {
	var out []Unplaced
	from := p.stepAt(p.tFrom)
	for b := range p.Blocks {
		d := &p.bd[b]
		if d.rem <= 0 || sc.planned[b] > 0 {
			continue
		}
		u := Unplaced{Block: b, ID: p.Blocks[b].ID}
		v := p.Vis[b]
		var count [constraints.NumReasons]int
		open := 0
		longest, cur := 0, 0
		fits := false
		for i := from; i < p.n; i++ {
			r := v.Reason[i]
			if r == constraints.OK && p.closed[i] {
				r = constraints.ReasonClosure
			}
			count[r]++
			if r != constraints.OK {
				cur = 0
				continue
			}
			open++
			if cur == 0 && !fits {
				// A window starts: does the shortest run fit in it?
				s := p.ceilQ(math.Max(float64(i)*p.step, p.tFrom))
				if it, ok := p.newRun(b, s); ok {
					need := p.minFrames(b, 0)
					for it.r.n < need && it.next() {
					}
					fits = it.r.n >= need
				}
			}
			cur++
			longest = max(longest, cur)
		}
		switch {
		case open == 0:
			u.Why = NeverObservable
			best := constraints.OK
			for r := constraints.Reason(1); int(r) < constraints.NumReasons; r++ {
				if count[r] > count[best] || best == constraints.OK && count[r] > 0 {
					best = r
				}
			}
			u.Constraint = best
		case !fits:
			u.Why = WindowTooShort
		default:
			u.Why = LostToHigherValue
		}
		u.LongestWindow = time.Duration(float64(longest) * p.step * float64(time.Second))
		out = append(out, u)
	}
	return out
}

// CadenceReport is what a plan delivers of one cadence block's series
// tonight: the runs (points) delivered, executed ones included, and every
// slot of the series that the plan skips, with the reason.
type CadenceReport struct {
	Block     int
	ID        string
	Every     time.Duration
	Delivered int
	Skipped   []SkippedSlot
}

// SkippedSlot is one slot of a cadence series without a run: the slot's
// centre (a whole number of Every from a delivered run) and why.
type SkippedSlot struct {
	At  time.Time
	Why SlotWhy
}

// SlotWhy says why a cadence slot has no run.
type SlotWhy uint8

// Reasons for a skipped cadence slot.
const (
	// SlotNotObservable: no run of the block's shortest length fits
	// inside its observable intervals within the slot's tolerance.
	SlotNotObservable SlotWhy = iota + 1
	// SlotClosed: a closure covers the slot.
	SlotClosed
	// SlotNoFrames: the block's frames are all planned.
	SlotNoFrames
	// SlotLostToHigherValue: a run would fit, but the time went to runs
	// worth more than the point.
	SlotLostToHigherValue
	// SlotPast: the slot lies before the plan's start.
	SlotPast
)

func (w SlotWhy) String() string {
	switch w {
	case SlotNotObservable:
		return "not observable"
	case SlotClosed:
		return "closure"
	case SlotNoFrames:
		return "no frames left"
	case SlotLostToHigherValue:
		return "lost to higher value"
	case SlotPast:
		return "before the plan's start"
	}
	return "unknown"
}

// cadenceReports explains the series of every cadence block with a run
// (blocks with none are in Unplaced).
func (p *Problem) cadenceReports(sc *sched) []CadenceReport {
	var out []CadenceReport
	for b := range p.Blocks {
		d := &p.bd[b]
		if d.every <= 0 {
			continue
		}
		var starts []float64
		for _, a := range p.Executed {
			if a.Block == b {
				starts = append(starts, p.rel(a.Start))
			}
		}
		for _, r := range sc.runs {
			if r.b == b {
				starts = append(starts, r.s)
			}
		}
		if len(starts) == 0 {
			continue
		}
		rep := CadenceReport{Block: b, ID: p.Blocks[b].ID, Every: secs(d.every), Delivered: len(starts)}
		skip := func(c float64) {
			if c+d.tol < 0 || c-d.tol >= p.tEnd {
				return
			}
			rep.Skipped = append(rep.Skipped, SkippedSlot{At: p.abs(c), Why: p.slotWhy(sc, b, c)})
		}
		var before []float64
		for c := starts[0] - d.every; c+d.tol >= 0; c -= d.every {
			before = append(before, c)
		}
		for i := len(before) - 1; i >= 0; i-- {
			skip(before[i]) // earliest first
		}
		for i := 1; i < len(starts); i++ {
			for c := starts[i-1] + d.every; c < starts[i]-d.tol; c += d.every {
				skip(c)
			}
		}
		for c := starts[len(starts)-1] + d.every; c-d.tol < p.tEnd; c += d.every {
			skip(c)
		}
		out = append(out, rep)
	}
	return out
}

// slotWhy says why cadence block b has no run in the slot centred at c.
func (p *Problem) slotWhy(sc *sched, b int, c float64) SlotWhy {
	d := &p.bd[b]
	lo, hi := c-d.tol, c+d.tol
	if hi < p.tFrom {
		return SlotPast
	}
	fits, closed := false, false
	for x := p.ceilQ(math.Max(lo, p.tFrom)); x <= hi && x < p.tEnd; x += p.quantum {
		it, ok := p.newRun(b, x)
		if !ok {
			if len(p.cl) > 0 && p.closureIn(x, x+p.quantum) >= 0 {
				closed = true
			}
			continue
		}
		for it.r.n < d.minRun && it.next() {
		}
		if it.r.n >= min(d.minRun, max(1, d.rem)) {
			fits = true
			break
		}
	}
	switch {
	case fits && sc.planned[b] >= d.rem:
		return SlotNoFrames
	case fits:
		return SlotLostToHigherValue
	case closed:
		return SlotClosed
	}
	return SlotNotObservable
}
