package scheduler

import (
	"errors"
	"fmt"
	"math"
	"testing"
	"time"

	"github.com/nightloom/nightloom/constraints"
	"github.com/nightloom/nightloom/ephem"
)

// netNight is the civil date of the test nights (invented scenario).
var netNight = time.Date(2027, 2, 10, 0, 0, 0, 0, time.UTC)

// testNetSite makes an invented network site at lat, lon (the overheads
// of DefaultOverheads, a german mount) with its night grid of 2027-02-10
// (nautical darkness, 1 min steps, no sky-brightness model).
func testNetSite(t testing.TB, name string, latDeg, lonDeg float64, filters []string, apertureMM float64) NetworkSite {
	t.Helper()
	is := genSites[0]
	is.Name, is.LatDeg, is.LonDeg, is.Zone, is.Horizon = name+" (invented)", latDeg, lonDeg, "", nil
	o := DefaultOverheads()
	is.Axis1RateDegS, is.Axis2RateDegS = o.Axis1RateDegS, o.Axis2RateDegS
	in := &Instance{Site: is}
	site, err := in.SiteOf()
	if err != nil {
		t.Fatal(err)
	}
	site.Overheads = o
	g, err := NightGrid(site.Site, netNight.Year(), netNight.Month(), netNight.Day(), constraints.DarkNautical, time.Minute,
		constraints.Options{NoSkyBrightness: true})
	if err != nil {
		t.Fatal(err)
	}
	return NetworkSite{Name: name, Site: site, Grid: g, Capability: Capability{Filters: filters, ApertureMM: apertureMM}}
}

// midnightLST is the local apparent sidereal time (deg) at the middle of
// the site's grid: a target at this right ascension transits mid-night.
func midnightLST(s *NetworkSite) float64 {
	mid := s.Grid.Start.Add(s.Grid.End().Sub(s.Grid.Start) / 2)
	snap := ephem.Prepare(ephem.NewInstant(mid))
	return snap.Local(&s.Site.Observer).LAST * ephem.Rad2Deg
}

// testNetBlock is a fixed-target block of frames x 300 s through filter.
func testNetBlock(t testing.TB, id string, raDeg, decDeg float64, filter string, frames int) NetworkBlock {
	t.Helper()
	st, err := ephem.NewStar(math.Mod(raDeg+360, 360), decDeg, 0, 0)
	if err != nil {
		t.Fatal(err)
	}
	return NetworkBlock{Block: Block{ID: id, Target: &constraints.Target{Name: id, Star: &st}, Filter: filter,
		Exposure: 300 * time.Second, FramesWanted: frames, MinRun: 2, MaxRun: frames, Priority: 5,
		Set: &constraints.Set{MaxAirmass: 3, MinAltDeg: 20, Darkness: constraints.DarkNautical}}}
}

// netOptions are deterministic search options for tests (iterations, not
// time, end every search).
func netOptions() Options { return Options{Seed: 3, Iterations: 300, Budget: -1} }

// framesAt sums the planned frames of network block g at each site.
func framesAt(pl *NetworkPlan, g int) map[string]int {
	out := map[string]int{}
	for _, sp := range pl.Sites {
		for _, a := range sp.Plan.Assignments {
			if !a.Executed && sp.Blocks[a.Block] == g {
				out[sp.Name] += a.Frames
			}
		}
	}
	return out
}

// checkNetworkPlan checks what every network plan must hold: each site's
// plan validates against its own problem, no block gets more frames than
// it has left over all sites, Frames adds up, and the objective is what
// the site plans add up to.
func checkNetworkPlan(t *testing.T, in *NetworkInput, pl *NetworkPlan) {
	t.Helper()
	for _, sp := range pl.Sites {
		if err := Validate(sp.Plan, sp.Problem); err != nil {
			t.Errorf("site %s: %v", sp.Name, err)
		}
	}
	for g := range in.Blocks {
		sum := 0
		for _, n := range framesAt(pl, g) {
			sum += n
		}
		b := &in.Blocks[g]
		left := b.FramesWanted - b.FramesDone
		for _, s := range in.Sites {
			for _, a := range s.Executed {
				if a.ID == b.ID {
					left -= a.Frames
				}
			}
		}
		if sum > max(0, left) {
			t.Errorf("block %s: %d frames planned over the network, %d left", b.ID, sum, left)
		}
		if sum != pl.Frames[g] {
			t.Errorf("block %s: Frames %d, assignments %d", b.ID, pl.Frames[g], sum)
		}
	}
	// Recomputed from the site plans, to the rounding of the sums.
	const valueTol = 1e-6 // relative
	if got := networkValue(in, pl); math.Abs(got-pl.Objective) > valueTol*math.Max(1, pl.Objective) {
		t.Errorf("objective %v, site plans add up to %v", pl.Objective, got)
	}
	if pl.Objective < pl.Separate*(1-1e-9) {
		t.Errorf("joint objective %v below the separate plan's %v", pl.Objective, pl.Separate)
	}
}

// A block both sites see goes where its quality (here: airmass) is higher:
// a target at declination +50 transits at altitude 78 deg from 38 N and
// 45 deg from 5 N (90 - |lat - dec|, spherical astronomy), one at -30
// the other way round (altitude 22 deg against 55 deg).
func TestNetworkBetterQualitySite(t *testing.T) {
	north := testNetSite(t, "north", 38, -106.95, nil, 0)
	south := testNetSite(t, "south", 5, -106.95, nil, 0)
	ra := midnightLST(&north)
	for _, c := range []struct {
		dec  float64
		want string
	}{{50, "north"}, {-30, "south"}} {
		in := NetworkInput{Sites: []NetworkSite{north, south}, Options: netOptions(),
			Blocks: []NetworkBlock{testNetBlock(t, fmt.Sprintf("dec%+.0f", c.dec), ra, c.dec, "R", 6)}}
		pl, err := SolveNetwork(in)
		if err != nil {
			t.Fatal(err)
		}
		checkNetworkPlan(t, &in, pl)
		got := framesAt(pl, 0)
		if got[c.want] != 6 || len(got) != 1 {
			t.Errorf("dec %+.0f: frames per site %v, want all 6 at %s", c.dec, got, c.want)
		}
	}
}

// A block only one site can do (filter, aperture, allowed sites) never
// lands on the other, even when the other sees it better or the first is
// closed; then each site says why not.
func TestNetworkCapability(t *testing.T) {
	north := testNetSite(t, "north", 38, -106.95, []string{"L", "R", "G", "B", "Ha"}, 400)
	south := testNetSite(t, "south", 5, -106.95, []string{"L", "R", "G", "B"}, 200)
	ra := midnightLST(&north)
	// The blocks are seen better from the south (declination -30).
	ha := testNetBlock(t, "ha", ra, -30, "Ha", 6)
	big := testNetBlock(t, "big", ra+10, -30, "R", 6)
	big.Needs.MinApertureMM = 300
	named := testNetBlock(t, "named", ra-10, -30, "R", 6)
	named.Sites = []string{"north"}
	closed := north
	closed.Closures = []Closure{{Start: north.Grid.Start, End: north.Grid.End(), Note: "clouds"}}
	for _, c := range []struct {
		name     string
		north    NetworkSite
		unplaced bool
	}{{"open", north, false}, {"north closed", closed, true}} {
		in := NetworkInput{Sites: []NetworkSite{c.north, south}, Options: netOptions(), Blocks: []NetworkBlock{ha, big, named}}
		pl, err := SolveNetwork(in)
		if err != nil {
			t.Fatal(err)
		}
		checkNetworkPlan(t, &in, pl)
		for g := range in.Blocks {
			got := framesAt(pl, g)
			if got["south"] != 0 {
				t.Errorf("%s: block %s has %d frames at the south site, which cannot take it", c.name, in.Blocks[g].ID, got["south"])
			}
			if !c.unplaced && got["north"] == 0 {
				t.Errorf("%s: block %s not planned at the north site", c.name, in.Blocks[g].ID)
			}
		}
		if !c.unplaced {
			continue
		}
		want := map[string]SiteWhy{"ha": LacksFilter, "big": ApertureTooSmall, "named": NotAllowed}
		if len(pl.Unplaced) != 3 {
			t.Fatalf("%s: unplaced %+v, want all three blocks", c.name, pl.Unplaced)
		}
		for _, u := range pl.Unplaced {
			for _, r := range u.Sites {
				switch {
				case r.Site == "south" && r.Why != want[u.ID]:
					t.Errorf("block %s at south: %v, want %v", u.ID, r.Why, want[u.ID])
				case r.Site == "north" && r.Why != SiteNeverObservable:
					// The closure or the altitude, whichever rules out more steps.
					t.Errorf("block %s at north: %v (%v), want never observable", u.ID, r.Why, r.Constraint)
				}
			}
			if len(u.Sites) != 2 {
				t.Errorf("block %s: reasons %+v, want one per site", u.ID, u.Sites)
			}
		}
	}
}

// Weather: the block goes to the better site; with that site closed for
// the night, a re-solve moves it to the other.
func TestNetworkClosureMovesBlock(t *testing.T) {
	north := testNetSite(t, "north", 38, -106.95, nil, 0)
	south := testNetSite(t, "south", 5, -106.95, nil, 0)
	ra := midnightLST(&north)
	blocks := []NetworkBlock{testNetBlock(t, "b", ra, 50, "R", 6)}
	in := NetworkInput{Sites: []NetworkSite{north, south}, Options: netOptions(), Blocks: blocks}
	pl, err := SolveNetwork(in)
	if err != nil {
		t.Fatal(err)
	}
	if got := framesAt(pl, 0); got["north"] != 6 {
		t.Fatalf("clear night: frames per site %v, want 6 at north", got)
	}
	closed := north
	start := north.Grid.Start.Add(north.Grid.End().Sub(north.Grid.Start) / 3)
	closed.Closures = []Closure{{Start: start, End: north.Grid.End(), Note: "roof closed, rain"}}
	in.Sites[0] = closed
	in.From = start
	pl, err = SolveNetwork(in)
	if err != nil {
		t.Fatal(err)
	}
	checkNetworkPlan(t, &in, pl)
	if got := framesAt(pl, 0); got["south"] != 6 || got["north"] != 0 {
		t.Errorf("north closed: frames per site %v, want all 6 at south", got)
	}
}

// netSites are the invented sites of generated networks: the three
// latitudes of the instance generator (38 N, 28 S, 55 N; site k takes
// generator site k % 3 for its horizon, mount and sky) at longitudes on
// several continents.
var netSites = []struct {
	name   string
	lonDeg float64
	zone   string
}{
	{"Ravensgate Ridge", -106.95, "America/Denver"},
	{"Cerro Piedra Tenue", -67.92, "America/Argentina/Catamarca"},
	{"Skerrow Fell", -3.1, "Europe/London"},
	{"Pelagos Heights", 22.4, "Europe/Athens"},
	{"Karroo Flats", 21.1, "Africa/Johannesburg"},
	{"Tomsk Steppe", 84.9, "Asia/Novosibirsk"},
	{"Kumo Plateau", 138.2, "Asia/Tokyo"},
	{"Mulga Downs", 149.1, "Australia/Brisbane"},
	{"Caribou Lake", -122.6, "America/Vancouver"},
	{"Zanskar Gate", 77.6, "Asia/Kolkata"},
}

// netFilterSets: not every wheel holds every filter (site k takes set k % 3).
var netFilterSets = [][]string{
	{"L", "R", "G", "B", "Ha", "OIII", "SII", "V"},
	{"L", "R", "G", "B", "V"},
	{"L", "R", "G", "B", "Ha", "OIII", "SII"},
}

// genNetwork makes a deterministic invented network of nSites sites, each
// contributing perSite blocks from GenerateInstance (placed for its own
// sky, so that most are visible from several sites), over nights nights
// from 2027-02-10 with 2 min steps. Every seventh block needs a 300 mm
// aperture (sites have 250 or 400 mm) and every eleventh names its own
// site only.
func genNetwork(tb testing.TB, seed uint64, nSites, perSite, nights int, load float64) NetworkInput {
	tb.Helper()
	var in NetworkInput
	var all []Block
	for k := 0; k < nSites; k++ {
		ns := netSites[k%len(netSites)]
		gi, err := GenerateInstance(GenSpec{Name: fmt.Sprintf("s%d", k), Seed: seed + uint64(k), Site: k % 3,
			Night: "2027-02-10", Nights: nights, Blocks: perSite, StepS: 120, Load: load, Cadence: 0.05, NoSky: true})
		if err != nil {
			tb.Fatal(err)
		}
		gi.Site.Name, gi.Site.LonDeg, gi.Site.Zone = ns.name+" (invented)", ns.lonDeg, ns.zone
		site, err := gi.SiteOf()
		if err != nil {
			tb.Fatal(err)
		}
		blocks, err := gi.BlocksOf()
		if err != nil {
			tb.Fatal(err)
		}
		for i, b := range blocks {
			nb := NetworkBlock{Block: b}
			if i%7 == 3 {
				nb.Needs.MinApertureMM = 300
			}
			if i%11 == 5 {
				nb.Sites = []string{ns.name}
			}
			in.Blocks = append(in.Blocks, nb)
			all = append(all, b)
		}
		in.Sites = append(in.Sites, NetworkSite{Name: ns.name, Site: site,
			Capability: Capability{Filters: netFilterSets[k%3], ApertureMM: []float64{400, 250}[k%2]}})
	}
	dark := WeakestDarkness(all)
	for k := range in.Sites {
		s := &in.Sites[k]
		g, err := NightGrid(s.Site.Site, netNight.Year(), netNight.Month(), netNight.Day(), dark, 2*time.Minute,
			constraints.Options{NoSkyBrightness: true})
		if err != nil {
			tb.Fatal(err)
		}
		s.Grid = g
	}
	return in
}

// A generated network of three sites: every site's plan is valid, frames
// are never exceeded over the network, and the joint plan is at least the
// separate one.
func TestNetworkGenerated(t *testing.T) {
	in := genNetwork(t, 11, 3, 40, 1, 1.5)
	in.Options = netOptions()
	pl, err := SolveNetwork(in)
	if err != nil {
		t.Fatal(err)
	}
	checkNetworkPlan(t, &in, pl)
	t.Logf("objective %.0f, separate %.0f (x%.3f); rounds %d, steps kept %d, relocations %d/%d, unplaced %d",
		pl.Objective, pl.Separate, pl.Objective/pl.Separate, pl.Rounds, pl.StepsKept, pl.MovesKept, pl.Moves, len(pl.Unplaced))
	for _, u := range pl.Unplaced {
		if len(u.Sites) != len(in.Sites) {
			t.Errorf("unplaced %s: %d reasons for %d sites", u.ID, len(u.Sites), len(in.Sites))
		}
		for _, r := range u.Sites {
			if r.Why == 0 {
				t.Errorf("unplaced %s at %s: no reason", u.ID, r.Site)
			}
		}
	}
}

// The exact optimum of tiny networks: 2 sites, 3 or 4 blocks of a few
// frames, the last 80-100 minutes of the night, no completion bonus and
// MinRun 1. The objective is then the sum of the sites' weighted exposure
// and a plan's value at a site only grows with the frames it may take, so
// the network optimum is the best, over every split of each block's frames
// between the two sites (c at the first, left - c at the second), of the
// sum of the two sites' exact optima (Exact) under those caps. The joint
// solver must reach it.
func TestNetworkExactTiny(t *testing.T) {
	north := testNetSite(t, "north", 38, -106.95, nil, 0)
	south := testNetSite(t, "south", 5, -106.95, nil, 0)
	for _, c := range []struct {
		decs    []float64
		frames  int
		minutes int
	}{
		{[]float64{40, -10, 15}, 4, 100},
		{[]float64{30, 0, 20, -5}, 3, 80},
		{[]float64{45, 25, -15, 5}, 3, 90},
	} {
		t.Run(fmt.Sprintf("%dblocks-%dmin", len(c.decs), c.minutes), func(t *testing.T) {
			if testing.Short() && len(c.decs) > 3 {
				t.Skip("-short: the 3-block network only")
			}
			exactTiny(t, north, south, c.decs, c.frames, c.minutes)
		})
	}
}

func exactTiny(t *testing.T, north, south NetworkSite, decs []float64, frames, minutes int) {
	from := north.Grid.End().Add(-time.Duration(minutes) * time.Minute)
	snap := ephem.Prepare(ephem.NewInstant(from.Add(time.Duration(minutes/2) * time.Minute)))
	ra := snap.Local(&north.Site.Observer).LAST * ephem.Rad2Deg
	var blocks []NetworkBlock
	for i, dec := range decs {
		b := testNetBlock(t, fmt.Sprintf("t%d", i), ra+float64(i-1)*12, dec, []string{"R", "G"}[i%2], frames)
		b.Exposure = 600 * time.Second
		b.MinRun, b.MaxRun = 1, frames
		blocks = append(blocks, b)
	}
	opts := Options{Seed: 5, Iterations: 400, Budget: -1, Quantum: time.Minute, CompletionBonus: -1}
	in := NetworkInput{Sites: []NetworkSite{north, south}, Blocks: blocks, From: from, Options: opts}
	pl, err := SolveNetwork(in)
	if err != nil {
		t.Fatal(err)
	}
	checkNetworkPlan(t, &in, pl)

	nw, err := newNetwork(&in)
	if err != nil {
		t.Fatal(err)
	}
	// best[s][code]: site s's exact optimum when it may take c_b frames of
	// block b, code = sum c_b splits^b.
	splits := frames + 1
	n := 1
	for range blocks {
		n *= splits
	}
	var best [2][]float64
	for s := range best {
		best[s] = make([]float64, n)
		for code := 0; code < n; code++ {
			taken := make([]int, len(blocks))
			for b, c := 0, code; b < len(blocks); b, c = b+1, c/splits {
				taken[nw.sites[s].loc[b]] = frames - c%splits
			}
			q := capped(nw.sites[s].base, taken)
			ex, err := Exact(q, ExactLimits{MaxStates: 2_000_000})
			if err != nil {
				t.Fatal(err)
			}
			best[s][code] = ex.Objective.Value
		}
	}
	opt := 0.0
	for code := 0; code < n; code++ {
		other := 0
		for b, c, m := 0, code, 1; b < len(blocks); b, c, m = b+1, c/splits, m*splits {
			other += (frames - c%splits) * m
		}
		opt = math.Max(opt, best[0][code]+best[1][other])
	}
	code0, m := 0, 1
	for b := range blocks {
		code0 += framesAt(pl, b)["north"] * m
		m *= splits
	}
	t.Logf("exact at the joint plan's split: north %.1f (plan %.1f), south %.1f (plan %.1f)", best[0][code0], pl.Sites[0].Plan.Objective.Value,
		best[1][n-1-code0], pl.Sites[1].Plan.Objective.Value)
	bound, err := NetworkBound(in, pl.Objective, 0)
	if err != nil {
		t.Fatal(err)
	}
	t.Logf("network bound %.1f (optimum / bound %.4f)", bound, opt/bound)
	// The bound's dynamic programming keeps run values in float32.
	const boundTol = 1e-6 // relative
	if bound < opt*(1-boundTol) {
		t.Errorf("NetworkBound %v below the exact optimum %v", bound, opt)
	}
	// The solver and Exact sum the same run values; only rounding differs.
	const optTol = 1e-9 // relative
	t.Logf("joint %.1f, exact optimum %.1f (ratio %.6f), separate %.1f", pl.Objective, opt, pl.Objective/opt, pl.Separate)
	if pl.Objective > opt*(1+optTol) {
		t.Errorf("joint objective %v above the exact optimum %v: the enumeration is wrong", pl.Objective, opt)
	}
	if pl.Objective < opt*(1-optTol) {
		t.Errorf("joint objective %v below the exact optimum %v (ratio %.6f)", pl.Objective, opt, pl.Objective/opt)
	}
}

// A light curve handed over as the Earth turns: a circumpolar target
// (declination +70, above 18 deg all night from 38 N) with one frame every
// 30 minutes and more points wanted than one site's night holds is
// followed from a site in Europe and then one in North America (nights
// about 8.5 hours apart in UTC); each site's runs form a series on the
// block's rhythm (Validate) and the frames add up to at most those wanted.
func TestNetworkCadenceHandOver(t *testing.T) {
	east := testNetSite(t, "east", 38, 20, nil, 0)
	west := testNetSite(t, "west", 38, -106.95, nil, 0)
	b := testNetBlock(t, "lc", midnightLST(&east), 70, "V", 40)
	b.Exposure = 120 * time.Second
	b.MinRun, b.MaxRun = 1, 1
	b.Priority = 8
	b.Cadence = &Cadence{Every: 30 * time.Minute, Tolerance: 5 * time.Minute}
	b.Set.MinAltDeg = 15
	in := NetworkInput{Sites: []NetworkSite{east, west}, Blocks: []NetworkBlock{b}, Options: netOptions()}
	pl, err := SolveNetwork(in)
	if err != nil {
		t.Fatal(err)
	}
	checkNetworkPlan(t, &in, pl)
	got := framesAt(pl, 0)
	var first, last [2]time.Time
	for k, sp := range pl.Sites {
		for _, a := range sp.Plan.Assignments {
			if first[k].IsZero() {
				first[k] = a.Start
			}
			last[k] = a.Start
		}
	}
	t.Logf("points: east %d (%s-%s UTC), west %d (%s-%s UTC)", got["east"], first[0].Format("15:04"), last[0].Format("15:04"),
		got["west"], first[1].Format("15:04"), last[1].Format("15:04"))
	// Consecutive points may be 25 min apart (Every - Tolerance), so one
	// night of at most 12 hours holds at most 12 h / 25 min + 1 = 29.
	if got["east"] == 0 || got["west"] == 0 || got["east"]+got["west"] <= 29 {
		t.Errorf("points per site %v: want the series followed at both sites beyond one night's 29", got)
	}
}

// Frames kept tonight at one site count at every other: the south site
// reports 4 of a block's 6 frames, so the north site (which sees it
// better) plans at most the 2 left, and the south plan validates with its
// executed run.
func TestNetworkExecutedElsewhere(t *testing.T) {
	north := testNetSite(t, "north", 38, -106.95, nil, 0)
	south := testNetSite(t, "south", 5, -106.95, nil, 0)
	ra := midnightLST(&north)
	b := testNetBlock(t, "b", ra, 50, "R", 6)
	start := south.Grid.Start.Add(3 * time.Hour)
	south.Executed = []Assignment{{ID: "b", Start: start, End: start.Add(4 * 304 * time.Second), Frames: 4}}
	in := NetworkInput{Sites: []NetworkSite{north, south}, Blocks: []NetworkBlock{b}, Options: netOptions(),
		From: start.Add(30 * time.Minute)}
	pl, err := SolveNetwork(in)
	if err != nil {
		t.Fatal(err)
	}
	checkNetworkPlan(t, &in, pl)
	if got := framesAt(pl, 0); got["north"]+got["south"] != 2 {
		t.Errorf("frames per site %v after 4 executed at south: want 2 in total", got)
	}
}

// Bad network input is refused with the error naming what is wrong.
func TestNetworkInputErrors(t *testing.T) {
	north := testNetSite(t, "north", 38, -106.95, []string{"R"}, 0)
	b := testNetBlock(t, "b", 0, 50, "R", 6)
	ha := testNetBlock(t, "ha", 0, 50, "Ha", 6)
	other := b
	other.Sites = []string{"nowhere"}
	exec := north
	exec.Executed = []Assignment{{ID: "ha", Start: north.Grid.Start, End: north.Grid.Start.Add(time.Minute), Frames: 1}}
	for _, c := range []struct {
		name string
		in   NetworkInput
		want error
	}{
		{"no sites", NetworkInput{Blocks: []NetworkBlock{b}}, ErrNetwork},
		{"site twice", NetworkInput{Sites: []NetworkSite{north, north}}, ErrNetwork},
		{"block twice", NetworkInput{Sites: []NetworkSite{north}, Blocks: []NetworkBlock{b, b}}, ErrBlock},
		{"unknown site", NetworkInput{Sites: []NetworkSite{north}, Blocks: []NetworkBlock{other}}, ErrBlock},
		{"executed, cannot take", NetworkInput{Sites: []NetworkSite{exec}, Blocks: []NetworkBlock{b, ha}}, ErrNetwork},
	} {
		if _, err := SolveNetwork(c.in); !errors.Is(err, c.want) {
			t.Errorf("%s: error %v, want %v", c.name, err, c.want)
		}
	}
}

// Three nights of a small network: every night's plans are valid, and the
// frames planned over all nights and sites never exceed what a block
// wants.
func TestNetworkHorizon(t *testing.T) {
	in := genNetwork(t, 5, 2, 25, 3, 1)
	in.Options = Options{Seed: 2, Iterations: 150, Budget: -1}
	nights, err := NetworkHorizon(NetworkHorizonInput{Network: in, First: netNight, Nights: 3, NoSky: true})
	if err != nil {
		t.Fatal(err)
	}
	total := make([]int, len(in.Blocks))
	for _, n := range nights {
		for _, sp := range n.Plan.Sites {
			if err := Validate(sp.Plan, sp.Problem); err != nil {
				t.Errorf("%s, site %s: %v", n.Date.Format(time.DateOnly), sp.Name, err)
			}
		}
		for g, f := range n.Plan.Frames {
			total[g] += f
		}
	}
	for g, b := range in.Blocks {
		if total[g] > b.FramesWanted-b.FramesDone {
			t.Errorf("block %s: %d frames over 3 nights, %d left", b.ID, total[g], b.FramesWanted-b.FramesDone)
		}
	}
}
