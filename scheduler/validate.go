package scheduler

import (
	"errors"
	"fmt"
	"math"
	"time"

	"github.com/nightloom/nightloom/constraints"
	"github.com/nightloom/nightloom/ephem"
)

// ErrInvalidPlan reports a plan that breaks the model.
var ErrInvalidPlan = errors.New("scheduler: invalid plan")

// Tolerances of Validate: instants to the millisecond (plans are built in
// float64 seconds and rounded to the nanosecond); hour angles to 1e-6 rad
// (0.2 arcsec); objective to 1e-6 relative.
const (
	validateTimeTol = 1e-3
	validateHATol   = 1e-6
	validateRelTol  = 1e-6
)

// Validate checks a plan against its problem, independently of how it was
// made:
//
//   - assignments are in time order, never overlap, and every gap holds the
//     overheads the model asks for (slew from the actual pointing, settle,
//     filter change, focus, acquisition), after the plan's start;
//   - every exposure follows the frame layout: readout after each frame,
//     a dither after every DitherEvery frames, a meridian flip (german
//     equatorial mounts) that starts inside the flip zone and lasts the
//     site's flip time, and no east-side frame that ends past the zone;
//   - every run lies inside one continuous observable interval of its
//     block (Problem.Intervals: every instant, not only the grid's
//     samples), every grid sample inside it is observable with the Sun at
//     least the site's solar-avoidance floor away (checked on the track
//     itself), and no run or setup overlaps a closure;
//   - runs are between MinRun (unless they complete the block) and MaxRun
//     frames, no block gets more frames than it wants, cadence series are
//     evenly spaced;
//   - the objective's parts add up.
func Validate(pl *Plan, p *Problem) error {
	bad := func(k int, format string, args ...any) error {
		return fmt.Errorf("%w: assignment %d: %s", ErrInvalidPlan, k, fmt.Sprintf(format, args...))
	}
	floor := math.Max(p.Site.SolarFloorDeg, constraints.MinSolarFloorDeg) * ephem.Deg2Rad
	frames := make([]int, len(p.Blocks))
	var lastStart = make([]float64, len(p.Blocks))
	var seriesLen = make([]int, len(p.Blocks))
	short := make([]int, len(p.Blocks))
	prev := prevState{block: -1, filter: -1}
	prevEnd := p.tFrom
	var weighted, cadence float64
	for k := range pl.Assignments {
		a := &pl.Assignments[k]
		if a.Block < 0 || a.Block >= len(p.Blocks) || p.Blocks[a.Block].ID != a.ID {
			return bad(k, "unknown block %d %q", a.Block, a.ID)
		}
		b := a.Block
		blk := &p.Blocks[b]
		d := &p.bd[b]
		s, e := p.rel(a.Start), p.rel(a.End)
		frames[b] += a.Frames
		if a.Executed {
			prev = p.after(b, s, sideOf(a))
			prevEnd = math.Max(p.tFrom, e)
			recordSeries(d, s, lastStart, seriesLen, b)
			continue
		}
		if k > 0 && pl.Assignments[k-1].Start.After(a.Start) {
			return bad(k, "out of time order")
		}
		if e > p.tEnd+validateTimeTol {
			return bad(k, "ends at %v after the grid's end %v", a.End, p.Grid.End())
		}
		// The gap before the run.
		su := p.setup(prev, b, s)
		tot := su.total()
		if s-prevEnd < tot-validateTimeTol {
			return bad(k, "gap %.3f s before %s shorter than its overheads %.3f s (slew %.1f, settle %.1f, filter %.1f, focus %.1f, acquisition %.1f)",
				s-prevEnd, blk.ID, tot, su.slew, su.settle, su.filter, su.focus, su.acq)
		}
		for _, c := range p.Closures {
			if s-tot < p.rel(c.End) && e > p.rel(c.Start) {
				return bad(k, "run or its setup [%v, %v) overlaps closure [%v, %v)", p.abs(s-tot), a.End, c.Start, c.End)
			}
		}
		// Frames.
		if a.Frames < 1 || len(a.FrameStarts) != a.Frames {
			return bad(k, "%d frames, %d frame starts", a.Frames, len(a.FrameStarts))
		}
		if math.Abs(p.rel(a.FrameStarts[0])-s) > validateTimeTol {
			return bad(k, "first exposure at %v, not at the start %v", a.FrameStarts[0], a.Start)
		}
		last := p.rel(a.FrameStarts[a.Frames-1]) + d.frame
		if math.Abs(last-e) > validateTimeTol {
			return bad(k, "end %v is not the last readout's end %v", a.End, p.abs(last))
		}
		gem := p.Site.Mount == constraints.GermanEquatorial
		west := gem && p.haAt(b, s) >= p.flip0
		if west != a.Pointing.PierWest {
			return bad(k, "pier side at start: west = %v, recorded %v", west, a.Pointing.PierWest)
		}
		if !a.Flip.IsZero() && (!gem || west || d.avoidFlip || a.FlipBefore < 1 || a.FlipBefore >= a.Frames) {
			return bad(k, "flip before frame %d not allowed here", a.FlipBefore)
		}
		val := d.point // a cadence point's value, whatever its frames
		for j := 0; j < a.Frames; j++ {
			t := p.rel(a.FrameStarts[j])
			if j > 0 {
				need := p.rel(a.FrameStarts[j-1]) + d.frame
				if d.ditherEvery > 0 && j%d.ditherEvery == 0 {
					need += d.dither
				}
				if !a.Flip.IsZero() && j == a.FlipBefore {
					f := p.rel(a.Flip)
					if f < need-validateTimeTol {
						return bad(k, "flip at %v before frame %d's predecessor is done", a.Flip, j)
					}
					if p.haAt(b, f) < p.flip0-validateHATol {
						return bad(k, "flip at hour angle %.4f deg, before the flip zone", p.haAt(b, f)*ephem.Rad2Deg)
					}
					need = f + p.oh.flp
					west = true
				}
				if t < need-validateTimeTol {
					return bad(k, "frame %d starts at %v, %.3f s early", j, a.FrameStarts[j], need-t)
				}
			}
			if gem && !west {
				if h := p.haAt(b, t+d.frame); h > p.flip1+validateHATol {
					return bad(k, "frame %d ends at hour angle %.4f deg, past the flip zone on the east side", j, h*ephem.Rad2Deg)
				}
			}
			val += d.w * float64(d.q[p.stepAt(t+d.exp/2)])
		}
		// The run lies in one continuous observable interval of its block
		// (closures taken out), and every grid sample inside it is
		// observable with the Sun beyond the floor.
		if lim := p.ivEnd(b, s); lim < 0 || e > lim+validateTimeTol {
			return bad(k, "%s [%v, %v] is not inside one observable interval (ends %v)", blk.ID, a.Start, a.End, p.abs(lim))
		}
		for i := int(math.Ceil(s / p.step)); i < p.n && float64(i)*p.step <= e; i++ {
			if r := p.Vis[b].Reason[i]; r != constraints.OK {
				return bad(k, "%s at step %d (%v): %v", blk.ID, i, p.Grid.Time(i), r)
			}
			if sep := float64(p.Tracks[b].SunSep[i]); sep < floor {
				return bad(k, "%s at step %d: %.2f deg from the Sun, inside the floor %.2f deg", blk.ID, i,
					sep*ephem.Rad2Deg, floor*ephem.Rad2Deg)
			}
		}
		if math.Abs(val-a.Value) > validateRelTol*math.Max(1, val) {
			return bad(k, "value %v, frames give %v", a.Value, val)
		}
		weighted += val - d.point
		cadence += d.point
		// Run length (a run shorter than MinRun must be the one remainder
		// run of a block that the plan completes; checked below).
		if a.Frames > d.maxRun {
			return bad(k, "%d frames, longest run %d", a.Frames, d.maxRun)
		}
		if a.Frames < d.minRun {
			short[b]++
		}
		if !recordSeries(d, s, lastStart, seriesLen, b) {
			return bad(k, "cadence of %s broken: %v after the previous run", blk.ID,
				time.Duration((s-lastStart[b])*float64(time.Second)))
		}
		lastStart[b] = s
		prev = p.after(b, s, sideOf(a))
		prevEnd = e
	}
	for b := range p.Blocks {
		if planned := frames[b] - executedFrames(p, b); short[b] > 1 || short[b] == 1 && planned != p.bd[b].rem {
			return fmt.Errorf("%w: block %q has %d runs shorter than %d frames and %d of %d frames planned",
				ErrInvalidPlan, p.Blocks[b].ID, short[b], p.bd[b].minRun, planned, p.bd[b].rem)
		}
		if got := p.Blocks[b].FramesDone + frames[b]; got > p.Blocks[b].FramesWanted && frames[b] > executedFrames(p, b) {
			return fmt.Errorf("%w: block %q gets %d frames, wants %d", ErrInvalidPlan, p.Blocks[b].ID, got, p.Blocks[b].FramesWanted)
		}
	}
	if math.Abs(weighted-pl.Objective.Weighted) > validateRelTol*math.Max(1, weighted) {
		return fmt.Errorf("%w: objective says %v weighted, assignments give %v", ErrInvalidPlan, pl.Objective.Weighted, weighted)
	}
	if math.Abs(cadence-pl.Objective.Cadence) > validateRelTol*math.Max(1, cadence) {
		return fmt.Errorf("%w: objective says %v for cadence points, assignments give %v", ErrInvalidPlan, pl.Objective.Cadence, cadence)
	}
	bonus := 0.0
	for b := range p.Blocks {
		d := &p.bd[b]
		if d.rem > 0 && frames[b]-executedFrames(p, b) >= d.rem {
			bonus += d.bonus
		}
	}
	if math.Abs(bonus-pl.Objective.Bonus) > validateRelTol*math.Max(1, bonus) ||
		math.Abs(pl.Objective.Value-pl.Objective.Weighted-pl.Objective.Cadence-pl.Objective.Bonus) > validateRelTol*math.Max(1, pl.Objective.Value) {
		return fmt.Errorf("%w: objective bonus %v (value %v), assignments give %v", ErrInvalidPlan, pl.Objective.Bonus, pl.Objective.Value, bonus)
	}
	return nil
}

// sideOf is the pier side at an assignment's end.
func sideOf(a *Assignment) int8 {
	if a.Pointing.PierWest || !a.Flip.IsZero() {
		return sideWest
	}
	return sideEast
}

// recordSeries checks a cadence block's spacing; it reports false when the
// run at s is not a whole number of Every (+- Tolerance) after the
// previous one (a series may skip slots).
func recordSeries(d *bdat, s float64, lastStart []float64, n []int, b int) bool {
	if d.every <= 0 {
		return true
	}
	ok := true
	if n[b] > 0 {
		ok = onSlot(s-lastStart[b], d.every, d.tol, validateTimeTol)
	}
	n[b]++
	lastStart[b] = s
	return ok
}

func executedFrames(p *Problem, b int) int {
	n := 0
	for _, a := range p.Executed {
		if a.Block == b {
			n += a.Frames
		}
	}
	return n
}
