// Package scheduler turns imaging blocks and their visibility into the
// night's sequence of runs, with slews, filter changes, focus runs and
// meridian flips counted as real time; it re-plans from any instant,
// dispatches the next run, plans horizons of nights, and measures its own
// quality against an exact solver and upper bounds.
//
// It is pure computation on top of package constraints: no I/O beyond
// decoding an Instance from an io.Reader.
//
// # Model
//
// Time is continuous (seconds from the start of the night's grid); the
// grid's steps carry feasibility and quality. A run of a block is n frames
// back to back: each frame is the exposure then the site's readout; after
// every DitherEvery frames a dither; on a german equatorial mount a run
// that starts east of the flip zone flips (the site's Flip time, after
// waiting for the hour angle to reach the zone's start if need be) before
// the first frame that would end past the zone's end. Every grid step that
// the run covers must be observable for the block and not closed. A run
// has between MinRun and MaxRun frames; one shorter run per block is
// allowed, anywhere in time, when the plan completes the block.
//
// A cadence block (Block.Cadence) asks for a series of runs, one per slot:
// consecutive runs of the series start a whole number of Every apart,
// within Tolerance of it (a series may skip slots; it may not put two runs
// in one slot or drift off its rhythm). The plan's Cadence reports list,
// per cadence block, the runs delivered and every skipped slot with its
// reason (not observable, closure, no frames left, lost to higher value).
//
// Before a run the mount slews from the previous pointing (the previous
// target where it is when the new run starts, a german mount stopping at
// the flip limit; the park position at the zenith before the first run)
// to the new target at the run's start (moving targets included): both
// axes at once at their rates, the slower one winning, on the hour-angle
// and declination axes of equatorial mounts (german ones do not wrap and
// use the pier-side axis angles) or azimuth and altitude for alt-azimuth.
// The setup is
//
//	max(slew + settle, filter change) + focus + acquisition
//
// with the filter change only when the filter differs and the focus run
// before the first run of the night, on a filter change (if the site
// asks) and before the first run that starts in each new FocusEvery
// period. The setup lies just before the run and must avoid closures.
// Runs start on a quantum grid (Options.Quantum, default 10 s) and the
// mount is free again at the first quantum boundary after a run; these
// roundings cost at most two quanta per run and make the exact solver
// exact for the same model.
//
// # Objective
//
// A plan maximises
//
//	sum over frames of priority_b * u_b * quality(step of mid-exposure) * exposure_s
//	+ sum over runs of cadence blocks of C * priority_b * u_b * MinRun_b * exposure_s
//	+ sum over blocks completed by the plan of B * priority_b * u_b * left_b * exposure_s
//
// (seconds of zenith, dark-sky exposure weighted by priority), with left_b
// the frames the block still wants when the plan starts, B the completion
// bonus (Options.CompletionBonus, default 0.25: a block with one frame of
// a hundred left earns a hundredth of a whole block's bonus, so nearly
// done blocks are not favoured beyond their frames) and nothing
// subtracted for idle time. Quality is the constraints package's factor in
// (0, 1]. Executed runs are reported but not counted.
//
// Cadence points: a light curve is worth its points in their slots, not
// its exposure seconds. Each run of a cadence block is a point worth C
// (Options.CadenceWeight, default 3) times the weighted exposure of its
// shortest run on top of its frames' value, so a missed slot costs
// (1 + C) times its exposure seconds; regularity is a rule of the model
// (runs only in slots, above). The point scales with the block's priority
// and urgency like everything else: a priority-8 light curve outweighs
// priority-6 imaging by about 4 x 8/6 per second of its runs, and loses
// to a run worth more than the point plus the setups it costs.
//
// Shared telescopes: a block may spend the time of a Program (its
// allocation for the period and the time already used). Every weight of
// the block (frames, cadence points, bonus) carries its program's
// fair-share factor
//
//	f = clamp(1 + lambda_f * (1 - used / allocation), 0.25, 2)
//
// (lambda_f = Options.FairShareWeight, default 0.5): 1 at the allocation,
// above for a program under it, below over it, so at equal priority the
// program under its allocation gets the time first. Plan.Charged reports
// per program the exposure and overheads (setups before the runs,
// readouts, dithers and flips inside them) the plan charges; they add up
// to the plan's exposure plus overheads.
//
// Replanning adds a stability term: every run of the old plan kept
// unchanged (same block, start and frames) earns Options.KeepBonus
// (default 0.5) times its value, so a replan moves a still-feasible run
// only when the change gains more than half of that run's value. Replan
// says per old run what became of it (kept, no longer feasible with the
// reason, moved, dropped).
//
// The urgency u_b favours blocks about to become unobservable for the
// season (a setting target, a comet closing on the Sun or fading, a
// block's latest date). A coarse lookahead (20 min grid, sky-brightness
// model off) over N nights from tonight (Options.LookaheadNights, default
// 14) counts the block's chances c_b: the nights with a window at least
// as long as its shortest run. With need_b the nights it still needs at
// one longest run per night, ceil(frames left / min(MaxRun, frames left)),
//
//	u_b = 1 + lambda * min(1, need_b / max(1, c_b))
//
// (lambda = Options.UrgencyWeight, default 1): a block with many chances
// left counts about once, one that must be done tonight twice. Without a
// lookahead u_b = 1. Cadence blocks always have u_b = 1 + lambda: each of
// their slots exists only tonight.
//
// # Algorithms
//
//   - Greedy (baseline): whenever the mount is free, start the block of
//     highest priority * urgency that can start right after its setup,
//     with as many frames as fit; if none can, wait one grid step.
//   - Solve (main): a constructive schedule by greedy insertion (the most
//     valuable run into any gap, repeatedly; each candidate is the longest
//     run as early as possible in one of the gap's windows, as late as
//     possible, or centred on the block's best quality, plus chains of
//     back-to-back runs that complete a block; candidates are evaluated
//     lazily, a block only when an upper bound on its score tops every
//     other, after Minoux 1978) improved by adaptive
//     large-neighbourhood search: destroy operators (random runs, a
//     stretch of time, Shaw's related removal by time, sky distance and
//     filter, worst value per second, all runs of one block) and repair
//     by the insertion heuristic ranked by value, value per second or
//     value with the bonus prorated, with and without noise; operator
//     weights adapt by their success and acceptance is simulated
//     annealing, as in Ropke & Pisinger (2006, Transportation Science 40,
//     455), with related removal after Shaw (1998, CP-98, LNCS 1520,
//     417). Every new best solution and the final one are polished by
//     local search (shift a run within its slack, swap adjacent runs);
//     the final one also by push moves (a run later and/or longer, the
//     runs after it moved as far as that needs), which trade one run's
//     loss for another's gain.
//     The annealing cools in three cycles; its clock is the iteration
//     count (a cycle is a third of Options.Iterations, at most
//     Options.ConvergeIterations), or, when the pace of the first 32
//     iterations shows that Options.Budget will end the search, the
//     elapsed share of the budget, so that a budget-limited search ends
//     cold whatever the machine's speed. The search stops early when the
//     best plan has not improved by Options.ConvergeTolerance (0.01 %)
//     for Options.ConvergeIterations (and, clocked by time, a tenth of
//     the budget): Plan.Stopped says StopConverged, and the budget is a
//     ceiling. A replan's first incumbent is the old plan's still-valid
//     runs, completed by insertion. It is deterministic for a given
//     Options.Seed when the iteration count or convergence (not the time
//     budget) ends it and the budget does not clock the annealing.
//   - Exact: dynamic programming over (quantum, last block, pier side,
//     focus period, and per block the frames still wanted, whether its one
//     short run is taken and, for a cadence block, the start of its last
//     run) with memoised recursion and branch and bound; exact for the
//     model above with starts on the quantum grid (the setup tabulated for
//     both focus decisions, a short run anywhere committing the plan to
//     completing its block as Validate has it, cadence runs only in the
//     slots of the last one, flips, closures). States are canonical:
//     frames beyond what a block can still hold count alike, blocks that
//     can no longer be observed drop out, passed cadence slots and stale
//     focus periods are forgotten. A state is cut when its admissible
//     upper bound (the smallest of fractional knapsacks of the frames,
//     points and bonuses left, Lagrangian bounds of the time-indexed
//     relaxation after Sousa & Wolsey 1992 with subgradient multipliers,
//     each block's best seconds alone, and the cadence series' chains of
//     runs) cannot beat what its caller needs (the incumbent, e.g. Solve's
//     value via ExactLimits.Incumbent). It proves nights of a few hours at
//     a 10 s quantum (the exact suite, in seconds); full nights with
//     several cadence series exceed its state limit.
//   - Bounds: BoundDP, the Lagrangian dual of the run-indexed time
//     formulation (Sousa & Wolsey 1992) with the per-block frame budgets
//     dualised and the inner problem solved by dynamic programming over
//     (quantum, filter); Bound, a slot-based linear relaxation solved as a
//     transportation flow with Lagrangian prices, cross-checked by BoundLP
//     with gonum's simplex; UpperBound takes the smaller. BoundDP also
//     dualises each cadence series' cap (the starts Every - Tolerance
//     apart that fit its observable span). ReferenceMILP writes a
//     time-indexed mixed-integer relaxation (integer frames, runs and
//     completions, focus runs per focus period and filter) for an outside
//     solver; its optimum, committed in testdata/milp, is another upper
//     bound. BoundPath keeps the last block in the DP's state, (quantum,
//     last block), so that slews count: a state-space relaxation after
//     Christofides, Mingozzi & Toth (1981, Networks 11, 145) whose
//     setups are the model's own lower-bounded over a grid step and both
//     pier sides of the previous target (the periodic focus dropped), with
//     BoundDP's multipliers warm-started by a longer subgradient run; it
//     is O(quanta x blocks^2) per iteration, skipped on instances beyond
//     pathMaxWork, and UpperBound takes it too. They exist to measure
//     Solve.
//   - Replan re-plans from an instant keeping what is still good; Dispatch
//     picks the next run consistent with the plan; Horizon plans nights in
//     turn with frames carried over.
//
// Every block left out is explained: never observable (with the
// constraint that rules out the most steps), window too short for its
// shortest run, or lost to higher-value blocks.
package scheduler
