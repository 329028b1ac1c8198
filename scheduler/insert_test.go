package scheduler

import (
	"testing"
)

// TestBoundInGapIsUpperBound checks the bound that lets repair evaluate
// blocks lazily: for every gap of a partly emptied timeline (and the empty
// night), every block and every scoring mode, bestInGap finds no candidate
// with a positive delta whose score exceeds boundInGap, and none at all
// where boundInGap says there is none. A bound that is too low would make
// repair skip insertions that scoring every block would take.
func TestBoundInGapIsUpperBound(t *testing.T) {
	names := []string{"plan200", "medium"}
	if !testing.Short() {
		names = append(names, "large")
	}
	for _, name := range names {
		p, err := loadInstance(t, name).Problem(Options{Seed: 1})
		if err != nil {
			t.Fatal(err)
		}
		for _, empty := range []bool{true, false} {
			sc := p.emptySched()
			if !empty {
				sc = p.constructive()
				del := make([]bool, len(sc.runs))
				for i := range del {
					del[i] = i%3 == 0 || i%7 == 1
				}
				p.removeMarked(sc, del)
			}
			checked, bad := 0, 0
			for k := 0; k <= len(sc.runs); k++ {
				for b := range p.Blocks {
					for mode := byValue; mode <= byTightness; mode++ {
						c := p.bestInGap(sc, k, b, mode)
						if !c.ok || !(c.delta > 0) {
							continue
						}
						checked++
						ub, ok := p.boundInGap(sc, k, b, mode)
						if !ok || c.score > ub*(1+1e-12)+1e-9 {
							bad++
							if bad <= 5 {
								t.Errorf("%s (empty %v): gap %d block %d mode %d: score %v > bound %v (ok %v, extend %v)",
									name, empty, k, b, mode, c.score, ub, ok, c.extend)
							}
						}
					}
				}
			}
			if checked == 0 {
				t.Errorf("%s (empty %v): no candidate checked", name, empty)
			}
		}
	}
}
