package scheduler

import (
	"compress/gzip"
	"crypto/sha256"
	"encoding/hex"
	"encoding/json"
	"fmt"
	"io"
	"math"
	"os"
	"path/filepath"
	"strings"
	"testing"
)

// milpRegen is the command that regenerates the MILP exports and their
// reference table (DEVELOPERS.md).
const milpRegen = "go run ./testdata/milp/export && /usr/bin/python3 testdata/milp/solve.py"

// milpTable is testdata/milp/reference.json, written by solve.py.
type milpTable struct {
	Solver    string `json:"solver"`
	Scipy     string `json:"scipy"`
	Instances []struct {
		Name      string   `json:"name"`
		SHA256    string   `json:"sha256"`
		Status    int      `json:"status"`
		Message   string   `json:"message"`
		Incumbent float64  `json:"incumbent"`
		Bound     *float64 `json:"bound"`
		MIPGap    float64  `json:"mip_gap"`
		WallS     float64  `json:"wall_s"`
	} `json:"instances"`
}

func readMILPTable(t testing.TB) *milpTable {
	t.Helper()
	f, err := os.Open(filepath.Join("..", "testdata", "milp", "reference.json"))
	if err != nil {
		t.Fatal(err)
	}
	defer f.Close()
	var tab milpTable
	if err := json.NewDecoder(f).Decode(&tab); err != nil {
		t.Fatal(err)
	}
	return &tab
}

// The committed MILP reference (HiGHS through scipy, testdata/milp) is
// current and consistent: (a) the export of each instance is the one that
// was solved (same SHA-256 as the table and the committed file), (b) the
// reference is an upper bound of the model (scheduler.ReferenceMILP is a
// relaxation), so no plan of the solver is above it, and neither is any
// plan above the tightened UpperBound. The two bounds relax different
// things (the MILP: sequencing within a focus period and slews; UpperBound:
// frame budgets and cadence spacing dualised, slews), so neither is
// checked against the other; both ratios are logged.
func TestReferenceMILP(t *testing.T) {
	if testing.Short() {
		t.Skip("plans two medium instances with a long search")
	}
	tab := readMILPTable(t)
	if len(tab.Instances) < 2 {
		t.Fatalf("reference table has %d instances, want medium and a 100-200 block one", len(tab.Instances))
	}
	for _, r := range tab.Instances {
		in := loadInstance(t, r.Name)
		p, err := in.Problem(Options{Seed: 1, Budget: -1})
		if err != nil {
			t.Fatal(err)
		}
		m, err := p.ReferenceMILP(r.Name)
		if err != nil {
			t.Fatal(err)
		}
		sum, err := m.WriteJSON(io.Discard)
		if err != nil {
			t.Fatal(err)
		}
		if sum != r.SHA256 {
			t.Errorf("%s: the exported MILP changed (sha256 %s, table %s): regenerate with %s", r.Name, sum, r.SHA256, milpRegen)
			continue
		}
		if got := committedSHA(t, r.Name); got != sum {
			t.Errorf("%s: testdata/milp/%s.json.gz has sha256 %s, export %s: regenerate with %s", r.Name, r.Name, got, sum, milpRegen)
		}
		if r.Bound == nil {
			t.Errorf("%s: the table has no bound (status %d: %s)", r.Name, r.Status, r.Message)
			continue
		}
		ref := *r.Bound
		pl := Solve(p)
		mustValidate(t, r.Name, pl, p)
		v := pl.Objective.Value
		ub := UpperBound(p)
		if v > ref*(1+1e-9) {
			t.Errorf("%s: plan %.1f above the MILP reference bound %.1f", r.Name, v, ref)
		}
		if v > ub*(1+1e-9) {
			t.Errorf("%s: plan %.1f above UpperBound %.1f", r.Name, v, ub)
		}
		// A point of the MILP built from the plan: feasible, worth at least
		// the plan (the relaxation's claim, checked without a solver).
		if err := milpHoldsPlan(m, p, pl); err != nil {
			t.Errorf("%s: %v", r.Name, err)
		}
		t.Logf("%s: %d blocks, plan %.1f, UpperBound %.1f (ratio %.4f), MILP reference bound %.1f (ratio %.4f; %s, gap %.2g, %.0f s)",
			r.Name, len(p.Blocks), v, ub, v/ub, ref, v/ref, r.Message, r.MIPGap, r.WallS)
	}
}

func committedSHA(t *testing.T, name string) string {
	t.Helper()
	f, err := os.Open(filepath.Join("..", "testdata", "milp", name+".json.gz"))
	if err != nil {
		t.Fatal(err)
	}
	defer f.Close()
	zr, err := gzip.NewReader(f)
	if err != nil {
		t.Fatal(err)
	}
	h := sha256.New()
	if _, err := io.Copy(h, zr); err != nil {
		t.Fatal(err)
	}
	return hex.EncodeToString(h.Sum(nil))
}

// milpHoldsPlan maps a plan to a point of the reference MILP (frame time
// per step, frames, completions, runs per focus period, filters per
// period) and checks that the point satisfies every bound and row and is
// worth at least the plan's objective.
func milpHoldsPlan(m *MILP, p *Problem, pl *Plan) error {
	idx := make(map[string]int, m.Vars)
	for j, n := range m.VarNames {
		idx[n] = j
	}
	x := make([]float64, m.Vars)
	set := func(name string, v float64, add bool) error {
		j, ok := idx[name]
		if !ok {
			if v == 0 {
				return nil
			}
			return fmt.Errorf("the plan needs %s = %v, not in the MILP", name, v)
		}
		if add {
			x[j] += v
		} else {
			x[j] = v
		}
		return nil
	}
	i0 := p.stepAt(p.tFrom)
	win := p.n + 1
	if p.oh.focusEvery > 0 {
		win = int(math.Round(p.oh.focusEvery / p.step))
	}
	frames := make([]int, len(p.Blocks))
	for _, a := range pl.Assignments {
		b := a.Block
		d := &p.bd[b]
		id := p.Blocks[b].ID
		frames[b] += a.Frames
		for _, fs := range a.FrameStarts {
			s := p.rel(fs)
			e := s + d.frame
			for i := p.stepAt(s); i < p.n && float64(i)*p.step < e; i++ {
				lo, hi := math.Max(s, float64(i)*p.step), math.Min(e, float64(i+1)*p.step)
				if hi > lo {
					if err := set(fmt.Sprintf("x[%s,%d]", id, i-i0), hi-lo, true); err != nil {
						return err
					}
				}
			}
		}
		w := p.stepAt(p.rel(a.Start)) / win
		if err := set(fmt.Sprintf("r[%s,%d]", id, w), 1, true); err != nil {
			return err
		}
		if err := set(fmt.Sprintf("u[%d,%d]", d.filter, w), 1, false); err != nil {
			return err
		}
	}
	for b := range p.Blocks {
		id := p.Blocks[b].ID
		if err := set(fmt.Sprintf("n[%s]", id), float64(frames[b]), false); err != nil {
			return err
		}
		if j, ok := idx[fmt.Sprintf("c[%s]", id)]; ok && frames[b] >= p.bd[b].rem {
			x[j] = m.Hi[j]
		}
	}
	const tol = 1e-6
	for j := range x {
		if x[j] < m.Lo[j]-tol || x[j] > m.Hi[j]+tol*math.Max(1, math.Abs(m.Hi[j])) {
			return fmt.Errorf("%s = %v outside [%v, %v]", m.VarNames[j], x[j], m.Lo[j], m.Hi[j])
		}
	}
	act := make([]float64, len(m.RowLo))
	for i := range m.Rows {
		act[m.Rows[i]] += m.Vals[i] * x[m.Cols[i]]
	}
	for r := range act {
		scale := tol * math.Max(1, math.Max(math.Abs(m.RowLo[r]), math.Abs(m.RowHi[r])))
		if math.IsInf(m.RowHi[r], 1) {
			scale = tol * math.Max(1, math.Abs(m.RowLo[r]))
		}
		if act[r] < m.RowLo[r]-scale || act[r] > m.RowHi[r]+scale {
			return fmt.Errorf("row %s = %v outside [%v, %v]", m.RowNames[r], act[r], m.RowLo[r], m.RowHi[r])
		}
	}
	obj := 0.0
	for j := range x {
		obj += m.C[j] * x[j]
	}
	if obj < pl.Objective.Value*(1-1e-7) {
		return fmt.Errorf("the plan's point is worth %v, the plan %v", obj, pl.Objective.Value)
	}
	return nil
}

// On random nights with cadence, periodic focus, closures, comets and all
// three mounts, every plan the solver finds maps to a feasible point of the
// reference MILP worth at least the plan, and lies below the tightened
// bounds (BoundDP with the cadence series caps, Bound, UpperBound).
func TestBoundsHoldPlans(t *testing.T) {
	n := 4
	if testing.Short() {
		n = 2
	}
	for i := 0; i < n; i++ {
		sp := GenSpec{Name: fmt.Sprintf("hold%d", i), Seed: uint64(900 + i), Site: i % 3, Night: "2027-02-10", Blocks: 14 + 3*i,
			StepS: 60, Load: 2.5, Cadence: 0.2, Comets: i % 2, Lookahead: 14, CloseAtH: 1 + float64(i), CloseForH: 0.4 + 0.1*float64(i)}
		if i%3 == 2 {
			sp.Night = "2027-04-20" // a shorter night at 55 N
		}
		p := testProblem(t, sp, testOpts(uint64(i+1)))
		pl := Solve(p)
		mustValidate(t, sp.Name, pl, p)
		v := pl.Objective.Value
		bd, bf := BoundDP(p), Bound(p, DefaultBoundSlot)
		ub := math.Min(bd, bf) // UpperBound
		for _, c := range []struct {
			name string
			ub   float64
		}{{"BoundDP", bd}, {"Bound", bf}} {
			if v > c.ub*(1+1e-7) {
				t.Errorf("%s: plan %.2f above %s %.2f", sp.Name, v, c.name, c.ub)
			}
		}
		m, err := p.ReferenceMILP(sp.Name)
		if err != nil {
			if strings.Contains(err.Error(), "focus period") {
				continue
			}
			t.Fatal(err)
		}
		if err := milpHoldsPlan(m, p, pl); err != nil {
			t.Errorf("%s: %v", sp.Name, err)
		}
		t.Logf("%s: %d blocks, plan %.1f, UpperBound ratio %.4f", sp.Name, len(p.Blocks), v, v/ub)
	}
}
