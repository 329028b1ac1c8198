package scheduler

import (
	"crypto/sha256"
	"encoding/hex"
	"encoding/json"
	"fmt"
	"io"
	"math"
	"strconv"
)

// MILP is a mixed-integer linear program in a plain sparse form, written
// for an outside solver (testdata/milp): maximise C.x subject to RowLo <=
// A x <= RowHi and Lo <= x <= Hi, with x[j] integer where Integer[j].
// A is in coordinate form (Rows[i], Cols[i], Vals[i]).
type MILP struct {
	Name     string    `json:"name"`
	What     string    `json:"what"`
	Vars     int       `json:"vars"`
	C        []float64 `json:"c"`
	Lo       []float64 `json:"lo"`
	Hi       []float64 `json:"hi"`
	Integer  []bool    `json:"integer"`
	Rows     []int     `json:"rows"`
	Cols     []int     `json:"cols"`
	Vals     []float64 `json:"vals"`
	RowLo    []float64 `json:"row_lo"`
	RowHi    []float64 `json:"row_hi"`
	RowNames []string  `json:"row_names"`
	VarNames []string  `json:"var_names"`
	nrows    int
}

// milpWhat states what the exported program is (carried in the file).
const milpWhat = "slot relaxation of the nightloom model with integer frames, runs, completions and focus runs " +
	"(scheduler.ReferenceMILP): its optimum is an upper bound on every plan's objective, not a plan"

func (m *MILP) addVar(name string, c, lo, hi float64, integer bool) int {
	m.C = append(m.C, c)
	m.Lo = append(m.Lo, lo)
	m.Hi = append(m.Hi, hi)
	m.Integer = append(m.Integer, integer)
	m.VarNames = append(m.VarNames, name)
	m.Vars++
	return m.Vars - 1
}

// addRow adds lo <= sum coef[j] x[vars[j]] <= hi (math.Inf for none).
func (m *MILP) addRow(name string, vars []int, coef []float64, lo, hi float64) {
	for j, v := range vars {
		if coef[j] == 0 {
			continue
		}
		m.Rows = append(m.Rows, m.nrows)
		m.Cols = append(m.Cols, v)
		m.Vals = append(m.Vals, coef[j])
	}
	m.RowLo = append(m.RowLo, lo)
	m.RowHi = append(m.RowHi, hi)
	m.RowNames = append(m.RowNames, name)
	m.nrows++
}

// ReferenceMILP builds the time-indexed mixed-integer relaxation of the
// night that testdata/milp solves with an outside solver. Slots are grid
// steps from the plan's start; windows are the periodic-focus periods
// (FocusEvery must then be a whole number of steps). Variables, per block
// b with frames left and a usable step:
//
//	x[b,k] >= 0   frame time (s) of b in slot k, <= the slot's seconds where b is usable
//	n[b]          frames of b (integer, <= frames left)
//	c[b]          1 when the plan completes b (binary; 0 when its windows cannot hold its frames)
//	r[b,w]        runs of b starting in window w (integer)
//	u[f,w]        1 when a run with filter f starts in window w (binary)
//
// maximise sum w_b q_max(k) x[b,k] / frame_b + bonus_b c[b] + point_b sum_w r[b,w]
// (q_max is the best quality of b's usable steps within one frame of the
// slot, as in Bound), subject to
//
//	sum_k x[b,k] = frame_b n[b]                                   frames lie in usable time
//	n[b] <= MaxRun r[b];  n[b] >= MinRun r[b] - (MinRun-1) c[b];  n[b] >= left_b c[b]
//	sum_b x[b,k] <= open_k                                        one telescope (closures exact)
//	sum x + sum_b sigma r[b] + dither_b (n[b]/D_b - r[b]) + focus F <= open time
//	per window w: sum_{k in w} x + sigma sum_b r[b,w] + focus sum_f u[f,w] <= open_w + sigma + focus
//	r[b,w] <= R u[f_b,w];  cadence: r[b,w] and sum_w r[b,w] at most the starts Every-Tolerance apart
//
// with sigma = settle + acquisition (the least setup of any run: slews
// relaxed to zero, filter changes inside the settle), F the focus runs'
// lower bound sum_{f,w} u[f,w] (the first run starting in a focus period
// focuses, and so does every later run in it whose filter differs from its
// predecessor's, so a period whose runs use m filters holds at least m
// focus runs), and the window's slack one setup with its focus (only the
// first run starting in a window can have its setup before it). Every
// valid plan maps to a feasible point with at least its value (its frames,
// runs, completions and filters per period), so the optimum is an upper
// bound on the model's optimum: a "reference bound". It refuses replanning
// states (executed runs) and overhead models it does not cover.
func (p *Problem) ReferenceMILP(name string) (*MILP, error) {
	if len(p.Executed) > 0 {
		return nil, fmt.Errorf("%w: reference MILP: executed runs are not supported", ErrInput)
	}
	if p.oh.focus > 0 && !p.oh.focusOnFilter {
		return nil, fmt.Errorf("%w: reference MILP: focus without focus on filter change is not supported", ErrInput)
	}
	win := 0 // steps per window (0: one window)
	if p.oh.focusEvery > 0 {
		r := p.oh.focusEvery / p.step
		if math.Abs(r-math.Round(r)) > 1e-9 {
			return nil, fmt.Errorf("%w: reference MILP: focus period %v s is not a whole number of %v s steps", ErrInput, p.oh.focusEvery, p.step)
		}
		win = int(math.Round(r))
	}
	m := &MILP{Name: name, What: milpWhat}
	i0 := p.stepAt(p.tFrom)
	K := p.n - i0
	// Open seconds of every step after the plan's start (closures exact).
	open := make([]float64, K)
	total := 0.0
	for k := range open {
		a := math.Max(p.tFrom, float64(i0+k)*p.step)
		b := float64(i0+k+1) * p.step
		s := 0.0
		xs := subtractClosures(nil, a, b, p.cl)
		for j := 0; j < len(xs); j += 2 {
			s += xs[j+1] - xs[j]
		}
		open[k] = s
		total += s
	}
	winOf := func(k int) int {
		if win == 0 {
			return 0
		}
		return (i0 + k) / win
	}
	W := winOf(K-1) + 1
	openW := make([]float64, W)
	for k := range open {
		openW[winOf(k)] += open[k]
	}
	sigma := p.oh.settle + p.oh.acq
	rx := p.relaxation(1)
	// Slot rows gather x of every block per slot.
	slotVars := make([][]int, K)
	winVars := make([][]int, W)
	winCoef := make([][]float64, W)
	var globVars []int
	var globCoef []float64
	// u[f,w], made on demand.
	type fw struct{ f, w int }
	uvar := map[fw]int{}
	uOf := func(f, w int) int {
		if v, ok := uvar[fw{f, w}]; ok {
			return v
		}
		v := m.addVar(fmt.Sprintf("u[%d,%d]", f, w), 0, 0, 1, true)
		uvar[fw{f, w}] = v
		if p.oh.focus > 0 {
			winVars[w] = append(winVars[w], v)
			winCoef[w] = append(winCoef[w], p.oh.focus)
			globVars = append(globVars, v)
			globCoef = append(globCoef, p.oh.focus)
		}
		return v
	}
	for j, b := range rx.blocks {
		d := &p.bd[b]
		id := p.Blocks[b].ID
		var xv []int
		var xc []float64
		winHas := make([]bool, W)
		first, last := -1, -1
		for k := 0; k < K; k++ {
			if rx.use[j][k] <= 0 {
				continue
			}
			v := m.addVar(fmt.Sprintf("x[%s,%d]", id, k), d.w*rx.qmax[j][k]/d.frame, 0, math.Min(rx.use[j][k], open[k]), false)
			xv = append(xv, v)
			xc = append(xc, 1)
			slotVars[k] = append(slotVars[k], v)
			winVars[winOf(k)] = append(winVars[winOf(k)], v)
			winCoef[winOf(k)] = append(winCoef[winOf(k)], 1)
			globVars = append(globVars, v)
			globCoef = append(globCoef, 1)
			winHas[winOf(k)] = true
			if first < 0 {
				first = k
			}
			last = k
		}
		if len(xv) == 0 {
			continue
		}
		bonus := 0.0
		bonusHi := 0.0
		if p.framesPossible(b) >= d.rem {
			bonus, bonusHi = d.bonus, 1
		}
		n := m.addVar(fmt.Sprintf("n[%s]", id), 0, 0, float64(d.rem), true)
		c := m.addVar(fmt.Sprintf("c[%s]", id), bonus, 0, bonusHi, true)
		// Runs per window; cadence blocks at most the starts that fit
		// Every - Tolerance apart in the window's usable span.
		var rv []int
		rmax := float64(d.rem) // a run has at least one frame
		for w := 0; w < W; w++ {
			if !winHas[w] {
				continue
			}
			hi := rmax
			if d.every > 0 {
				a, e := math.Inf(1), math.Inf(-1)
				for k := first; k <= last; k++ {
					if winOf(k) == w && rx.use[j][k] > 0 {
						a = math.Min(a, float64(i0+k)*p.step)
						e = math.Max(e, float64(i0+k+1)*p.step)
					}
				}
				hi = math.Min(hi, math.Floor((e-a)/(d.every-d.tol))+1)
			}
			r := m.addVar(fmt.Sprintf("r[%s,%d]", id, w), d.point, 0, hi, true)
			rv = append(rv, r)
			winVars[w] = append(winVars[w], r)
			winCoef[w] = append(winCoef[w], sigma)
			u := uOf(d.filter, w)
			m.addRow(fmt.Sprintf("filter[%s,%d]", id, w), []int{r, u}, []float64{1, -hi}, math.Inf(-1), 0)
		}
		ones := func(k int) []float64 {
			o := make([]float64, k)
			for i := range o {
				o[i] = 1
			}
			return o
		}
		// Frames lie in usable time.
		m.addRow(fmt.Sprintf("frames[%s]", id), append(append([]int(nil), xv...), n), append(xc, -d.frame), 0, 0)
		// Run lengths: at most MaxRun frames each; at least MinRun but one
		// when the block is completed.
		rows := append(append([]int(nil), rv...), n)
		cf := ones(len(rv))
		for i := range cf {
			cf[i] = -math.Min(float64(d.maxRun), float64(d.rem))
		}
		m.addRow(fmt.Sprintf("maxrun[%s]", id), rows, append(cf, 1), math.Inf(-1), 0)
		cf = ones(len(rv))
		for i := range cf {
			cf[i] = -float64(d.minRun)
		}
		m.addRow(fmt.Sprintf("minrun[%s]", id), append(rows, c), append(append(cf, 1), float64(d.minRun-1)), 0, math.Inf(1))
		m.addRow(fmt.Sprintf("complete[%s]", id), []int{n, c}, []float64{1, -float64(d.rem)}, 0, math.Inf(1))
		if d.every > 0 {
			m.addRow(fmt.Sprintf("series[%s]", id), rv, ones(len(rv)), math.Inf(-1), float64(p.seriesMax(b)))
		}
		// Global time: setups and dithers.
		for _, r := range rv {
			globVars = append(globVars, r)
			globCoef = append(globCoef, sigma)
		}
		if d.ditherEvery > 0 && p.oh.dither > 0 {
			// A run of m frames dithers floor((m-1)/D) >= m/D - 1 times.
			globVars = append(globVars, n)
			globCoef = append(globCoef, p.oh.dither/float64(d.ditherEvery))
			for _, r := range rv {
				globVars = append(globVars, r)
				globCoef = append(globCoef, -p.oh.dither)
			}
		}
	}
	for k := 0; k < K; k++ {
		if len(slotVars[k]) > 1 {
			o := make([]float64, len(slotVars[k]))
			for i := range o {
				o[i] = 1
			}
			m.addRow(fmt.Sprintf("slot[%d]", k), slotVars[k], o, math.Inf(-1), open[k])
		}
	}
	slack := sigma + p.oh.focus
	if win > 0 {
		for w := 0; w < W; w++ {
			if len(winVars[w]) > 0 {
				m.addRow(fmt.Sprintf("window[%d]", w), winVars[w], winCoef[w], math.Inf(-1), openW[w]+slack)
			}
		}
	}
	m.addRow("night", globVars, globCoef, math.Inf(-1), total)
	return m, nil
}

// seriesMax bounds the runs of cadence block b tonight: starts Every -
// Tolerance apart between its first and last observable instants, and no
// more than its frames allow (pointsBound's count).
func (p *Problem) seriesMax(b int) int {
	d := &p.bd[b]
	first := p.ivNext(b, p.tFrom)
	if first >= p.tEnd || len(d.iv) == 0 {
		return 0
	}
	span := d.iv[len(d.iv)-1] - first
	return min(d.rem, d.rem/d.minRun+1, int(math.Floor(span/(d.every-d.tol)))+1)
}

// milpFloat formats a float for the exported JSON: the shortest form
// that reads back exactly, infinities as +-1e300 (JSON has none).
func milpFloat(x float64) string {
	switch {
	case math.IsInf(x, 1):
		return "1e300"
	case math.IsInf(x, -1):
		return "-1e300"
	}
	return strconv.FormatFloat(x, 'g', -1, 64)
}

// WriteJSON writes the program as JSON (infinite bounds as +-1e300) and
// returns the SHA-256 of what it wrote, the export's fingerprint.
func (m *MILP) WriteJSON(w io.Writer) (string, error) {
	h := sha256.New()
	out := io.MultiWriter(w, h)
	floats := func(xs []float64) json.RawMessage {
		b := []byte{'['}
		for i, x := range xs {
			if i > 0 {
				b = append(b, ',')
			}
			b = append(b, milpFloat(x)...)
		}
		return append(b, ']')
	}
	doc := struct {
		Name     string          `json:"name"`
		What     string          `json:"what"`
		Sense    string          `json:"sense"`
		Vars     int             `json:"vars"`
		C        json.RawMessage `json:"c"`
		Lo       json.RawMessage `json:"lo"`
		Hi       json.RawMessage `json:"hi"`
		Integer  []bool          `json:"integer"`
		Rows     []int           `json:"rows"`
		Cols     []int           `json:"cols"`
		Vals     json.RawMessage `json:"vals"`
		RowLo    json.RawMessage `json:"row_lo"`
		RowHi    json.RawMessage `json:"row_hi"`
		RowNames []string        `json:"row_names"`
		VarNames []string        `json:"var_names"`
	}{m.Name, m.What, "maximize", m.Vars, floats(m.C), floats(m.Lo), floats(m.Hi), m.Integer, m.Rows, m.Cols,
		floats(m.Vals), floats(m.RowLo), floats(m.RowHi), m.RowNames, m.VarNames}
	b, err := json.Marshal(doc)
	if err != nil {
		return "", err
	}
	if _, err := out.Write(append(b, '\n')); err != nil {
		return "", err
	}
	return hex.EncodeToString(h.Sum(nil)), nil
}
