package scheduler_test

import (
	"fmt"

	"github.com/nightloom/nightloom/scheduler"
)

// Plan one night of an invented site and explain what was left out.
func Example() {
	in, err := scheduler.GenerateInstance(scheduler.GenSpec{Name: "ex", Seed: 42, Site: 0, Night: "2027-02-10",
		Blocks: 12, StepS: 60, Load: 2, Lookahead: 14})
	if err != nil {
		fmt.Println(err)
		return
	}
	// A fixed iteration count and no time limit make the plan reproducible.
	p, err := in.Problem(scheduler.Options{Seed: 1, Iterations: 500, Budget: -1})
	if err != nil {
		fmt.Println(err)
		return
	}
	plan := scheduler.Solve(p)
	if err := scheduler.Validate(plan, p); err != nil {
		fmt.Println(err)
		return
	}
	greedy := scheduler.Greedy(p)
	fmt.Printf("%d runs, %d blocks completed, %.0f%% better than greedy\n", len(plan.Assignments),
		plan.Objective.Completed, 100*(plan.Objective.Value/greedy.Objective.Value-1))
	for _, a := range plan.Assignments[:3] {
		fmt.Printf("%s %s-%s UTC, %d frames\n", a.ID, a.Start.Format("15:04"), a.End.Format("15:04"), a.Frames)
	}
	for _, u := range plan.Unplaced[:2] {
		fmt.Printf("%s: %v\n", u.ID, u.Why)
	}
	// Output:
	// 10 runs, 4 blocks completed, 44% better than greedy
	// ex-0008 02:20-03:47 UTC, 17 frames
	// ex-0008 03:50-04:56 UTC, 13 frames
	// ex-0002 04:58-05:39 UTC, 8 frames
	// ex-0001: lost to higher-value blocks
	// ex-0005: never observable
}
