package constraints

import (
	"testing"
	"time"

	"github.com/nightloom/nightloom/ephem"
)

// edgeTol is how far an interval's edge may lie from the instant found by
// an independent method (EdgeResolution plus the event finder's own 0.1 s).
const edgeTol = EdgeResolution + 100*time.Millisecond

// The invented comet's morning window, as continuous intervals: it ends at
// civil dawn from ephem's event finder (Sun's centre at -6 deg, an
// independent root search) to 1 s, not at the next grid step, and every
// second inside it passes the direct check (CheckAt).
func TestIntervalsCometEndsAtCivilDawn(t *testing.T) {
	site := inventedSite(t)
	comet := inventedComet(t)
	start := time.Date(2027, 1, 15, 4, 30, 0, 0, time.UTC)
	for _, step := range []time.Duration{time.Minute, 5 * time.Minute} {
		g, err := NewGrid(site, start, start.Add(3*time.Hour), step, Options{})
		if err != nil {
			t.Fatal(err)
		}
		target := &Target{Name: "comet", Orbit: comet}
		tr, err := g.Track(target)
		if err != nil {
			t.Fatal(err)
		}
		req := Request{Set: &Set{Darkness: DarkCivil, MinSolarElongDeg: 15}, Exposure: 30 * time.Second, NonSidereal: true}
		v := g.Evaluate(tr, req)
		iv := g.Intervals(tr, req, v)
		if len(iv) != 1 {
			t.Fatalf("step %v: intervals %v, want one", step, iv)
		}
		n := ephem.EventsBetween(&site.Observer, start, start.Add(3*time.Hour))
		cd, _ := n.Get(ephem.CivilDawn)
		if d := cd.Sub(iv[0].End); d < 0 || d > edgeTol {
			t.Errorf("step %v: interval ends %v, civil dawn %v (%v before, want 0..%v)", step, iv[0].End, cd, d, edgeTol)
		}
		// Dense check: every second inside observable; one second past
		// either edge not.
		for at := iv[0].Start; !at.After(iv[0].End); at = at.Add(time.Second) {
			if r := g.CheckAt(target, req, at); r != OK {
				t.Fatalf("step %v: %v inside the interval fails: %v", step, at, r)
			}
		}
		for _, at := range []time.Time{iv[0].Start.Add(-EdgeResolution), iv[0].End.Add(EdgeResolution)} {
			if r := g.CheckAt(target, req, at); r == OK {
				t.Errorf("step %v: %v just outside the interval is observable: the edge is not tight", step, at)
			}
		}
		t.Logf("step %v: interval %s - %s UTC; civil dawn %s", step, iv[0].Start.Format("15:04:05"),
			iv[0].End.Format("15:04:05"), cd.Format("15:04:05"))
	}
}

// A dip between two observable samples is found: a horizon profile with a
// narrow spike that the target crosses between two 5-minute samples splits
// the interval there, and the certificate covers the rest (each second
// checked directly).
func TestIntervalsFindNarrowObstacle(t *testing.T) {
	site := inventedSite(t)
	start := time.Date(2027, 1, 15, 20, 0, 0, 0, time.UTC)
	star, _ := ephem.NewStar(80, 20, 0, 0)
	target := &Target{Name: "star", Star: &star}
	g, err := NewGrid(site, start, start.Add(6*time.Hour), 5*time.Minute, Options{})
	if err != nil {
		t.Fatal(err)
	}
	tr, _ := g.Track(target)
	// Put a 1-deg-wide, 80-deg-high spike in azimuth half way between two
	// samples of a step where the target is well up.
	k := -1
	for i := 0; i+1 < g.N; i++ {
		if tr.Alt[i] > 0.5 && tr.Alt[i+1] > 0.5 {
			k = i
			break
		}
	}
	if k < 0 {
		t.Fatal("target never up")
	}
	mid := g.Time(k).Add(g.Step / 2)
	pg, _ := NewGrid(site, mid, mid.Add(MinStep), MinStep, Options{})
	ptr, _ := pg.Track(target)
	az := float64(ptr.Az[0]) * ephem.Rad2Deg
	h, err := NewHorizon([]HorizonPoint{{ephem.NormAngle((az-0.3)*ephem.Deg2Rad) * ephem.Rad2Deg, 0},
		{az, 80}, {ephem.NormAngle((az+0.3)*ephem.Deg2Rad) * ephem.Rad2Deg, 0}})
	if err != nil {
		t.Fatal(err)
	}
	site2 := *site
	site2.Horizon = h
	g2, _ := NewGrid(&site2, start, start.Add(6*time.Hour), 5*time.Minute, Options{})
	tr2, _ := g2.Track(target)
	req := Request{Set: &Set{Darkness: DarkAstronomical}}
	v := g2.Evaluate(tr2, req)
	if !v.Feasible(k) || !v.Feasible(k+1) {
		t.Fatalf("samples %d, %d around the spike should both be observable", k, k+1)
	}
	iv := g2.Intervals(tr2, req, v)
	split := false
	for _, x := range iv {
		if x.End.After(g2.Time(k)) && x.End.Before(mid) {
			split = true
		}
		for at := x.Start; !at.After(x.End); at = at.Add(time.Second) {
			if r := g2.CheckAt(target, req, at); r != OK {
				t.Fatalf("%v inside %v..%v fails: %v", at, x.Start, x.End, r)
			}
		}
	}
	if !split {
		t.Errorf("no interval ends at the spike (between %v and %v): %v", g2.Time(k), mid, iv)
	}
}

// Skipping samples far from every limit (reaches) changes no interval:
// 300 stars spread over the sky, under constraint sets with and without
// the sky-brightness limit (whose estimated rate never lets a sample be
// skipped), on a night with a Moon, give exactly the intervals that
// certifying every step gives.
func TestIntervalsSkipChangesNothing(t *testing.T) {
	site := benchSite(t)
	start := time.Date(2026, 12, 24, 17, 0, 0, 0, time.UTC)
	g, err := NewGrid(site, start, start.Add(14*time.Hour), 2*time.Minute, Options{})
	if err != nil {
		t.Fatal(err)
	}
	sets := []*Set{
		{MaxAirmass: 2, MinAltDeg: 25, MinMoonSepDeg: 40, Darkness: DarkAstronomical},
		{MinAltDeg: 10, Darkness: DarkNautical, MaxHourAngleDeg: 60, AvoidFlipZone: true},
		{MaxAirmass: 1.6, MaxMoonIllum: 0.5, MoonIllumWhenUp: true, Darkness: DarkCivil, LocalStart: 19 * time.Hour, LocalEnd: 5 * time.Hour},
		fullSet(),
	}
	skipped := skipSamples
	defer func() { skipSamples = skipped }()
	same, n := 0, 0
	for k := 0; k < 300; k++ {
		ra, dec := float64(k)*137.508, -30+float64(k%90)
		st, err := ephem.NewStar(ra-360*float64(int(ra/360)), dec, 0, 0)
		if err != nil {
			t.Fatal(err)
		}
		tr, err := g.Track(&Target{Name: "star", Star: &st})
		if err != nil {
			t.Fatal(err)
		}
		req := Request{Set: sets[k%len(sets)], Exposure: time.Minute}
		v := g.Evaluate(tr, req)
		skipSamples = skipped
		a := g.Intervals(tr, req, v)
		skipSamples = 1
		b := g.Intervals(tr, req, v)
		n += len(b)
		if len(a) != len(b) {
			t.Fatalf("star %d: %d intervals with skips, %d without: %v, %v", k, len(a), len(b), a, b)
		}
		for i := range a {
			if !a[i].Start.Equal(b[i].Start) || !a[i].End.Equal(b[i].End) {
				t.Fatalf("star %d: interval %d is %v with skips, %v without", k, i, a[i], b[i])
			}
		}
		if len(b) > 0 {
			same++
		}
	}
	if same < 100 {
		t.Errorf("only %d of 300 stars observable: the check compares too little", same)
	}
	t.Logf("%d intervals of %d observable stars identical", n, same)
}
