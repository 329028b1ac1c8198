// Command gen writes the scheduler's benchmark instances (invented sites,
// targets and comets) into testdata/scheduler. It is deterministic: every
// instance has a fixed seed. Run from the repository root:
//
//	go run ./testdata/scheduler/gen
package main

import (
	"flag"
	"fmt"
	"os"
	"path/filepath"

	"github.com/nightloom/nightloom/scheduler"
)

// specs are the committed instances.
var specs = []scheduler.GenSpec{
	// small: exact optimum by dynamic programming; mostly all-or-nothing
	// blocks so that the frame space stays small, german mount (flips),
	// focus on filter change only.
	{Name: "small", Seed: 101, Site: 0, Night: "2027-02-10", Blocks: 8, StepS: 60, QuantumS: 60,
		Load: 1.6, AllOrNothing: 0.6, NoFocusEvery: true, Lookahead: 14},
	// medium: measured against the upper bound.
	{Name: "medium", Seed: 202, Site: 0, Night: "2027-02-10", Blocks: 60, StepS: 60,
		Load: 3, Cadence: 0.05, Comets: 1, Lookahead: 14},
	// medium150: measured against the tightened bound and the MILP
	// reference bound (testdata/milp): cadence, periodic focus, a comet
	// and a 50-minute closure.
	{Name: "medium150", Seed: 606, Site: 0, Night: "2027-02-10", Blocks: 150, StepS: 60,
		Load: 3, Cadence: 0.06, Comets: 1, Lookahead: 14, CloseAtH: 4.5, CloseForH: 50.0 / 60},
	// large: measured against greedy.
	{Name: "large", Seed: 303, Site: 1, Night: "2027-05-06", Blocks: 400, StepS: 60,
		Load: 3, Cadence: 0.05, Comets: 2, Lookahead: 14},
	// plan200: the one-night speed benchmark (and the replanning one).
	{Name: "plan200", Seed: 404, Site: 0, Night: "2027-02-10", Blocks: 200, StepS: 60,
		Load: 3, Cadence: 0.05, Comets: 1, Lookahead: 14},
	// horizon2000: 2000 blocks over 30 nights.
	{Name: "horizon2000", Seed: 505, Site: 0, Night: "2027-02-10", Nights: 30, Blocks: 2000, StepS: 120,
		Load: 2, Cadence: 0.03, Comets: 1},
}

func main() {
	dir := flag.String("dir", "testdata/scheduler", "output directory")
	flag.Parse()
	for _, sp := range specs {
		in, err := scheduler.GenerateInstance(sp)
		if err != nil {
			fmt.Fprintln(os.Stderr, sp.Name, err)
			os.Exit(1)
		}
		f, err := os.Create(filepath.Join(*dir, sp.Name+".json"))
		if err != nil {
			fmt.Fprintln(os.Stderr, err)
			os.Exit(1)
		}
		if err := scheduler.WriteInstance(f, in); err != nil {
			fmt.Fprintln(os.Stderr, err)
			os.Exit(1)
		}
		if err := f.Close(); err != nil {
			fmt.Fprintln(os.Stderr, err)
			os.Exit(1)
		}
		fmt.Printf("%s: %d blocks\n", sp.Name, len(in.Blocks))
	}
}
