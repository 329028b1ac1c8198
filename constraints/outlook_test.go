package constraints

import (
	"testing"
	"time"

	"github.com/nightloom/nightloom/ephem"
)

// outlookComet is the demo's invented comet NL-1 (hyperbolic, retrograde,
// perihelion 2027-01-21 TT at 0.42 AU): a morning object low in twilight.
func outlookComet(t *testing.T) *Target {
	t.Helper()
	c, err := ephem.NewConic(ephem.Orbit{QAU: 0.42, E: 1.0021, IncDeg: 131.4, NodeDeg: 33, PeriDeg: 195,
		PerihelionTT: ephem.JDFromLabel(time.Date(2027, 1, 21, 6, 0, 0, 0, time.UTC)), Law: ephem.MagComet, M1: 7.2, K1: 11})
	if err != nil {
		t.Fatal(err)
	}
	return &Target{Name: "NL-1", Orbit: c}
}

// TestOutlookAgainstBruteForce: for the invented hyperbolic comet near
// perihelion, the outlook's window each morning and its last good night
// agree with a brute-force scan every minute done with ephem directly
// (Sun's geometric altitude for the darkness, the comet's refracted
// altitude for the altitude floor, the topocentric Sun-comet angle for the
// elongation), not with this package's grid or tracks.
func TestOutlookAgainstBruteForce(t *testing.T) {
	const (
		minAltDeg   = 5
		minElongDeg = 18
		edgeTol     = time.Minute // one step: float32 tracks and tabulated refraction may move an edge by one sample
	)
	o, _ := ephem.NewObserver(44.12, 5.24, 650)
	site := NewSite(o)
	loc, err := time.LoadLocation("Europe/Paris")
	if err != nil {
		t.Skip("no time zone data:", err)
	}
	site.Location = loc
	tg := outlookComet(t)
	set := &Set{Darkness: DarkCivil, MinAltDeg: minAltDeg, MinSolarElongDeg: minElongDeg}
	first := time.Date(2027, 1, 10, 0, 0, 0, 0, time.UTC)
	const nights = 16
	out, err := ApparitionOutlook(site, tg, first, nights, Request{Set: set, Exposure: 30 * time.Second, NonSidereal: true}, time.Minute)
	if err != nil {
		t.Fatal(err)
	}
	bruteFirst, bruteLast := -1, -1
	for n := 0; n < nights; n++ {
		start := time.Date(2027, 1, 10+n, 12, 0, 0, 0, loc)
		var wins []TimeWindow
		open := false
		for i := 0; i < 1440; i++ {
			at := start.Add(time.Duration(i) * time.Minute)
			s := ephem.Prepare(ephem.NewInstant(at))
			l := s.Local(&site.Observer)
			sun := l.SunPlace()
			p, _, _ := l.OrbitPlace(tg.Orbit)
			ok := sun.Alt*ephem.Rad2Deg <= ephem.CivilAltDeg &&
				p.AltApparent*ephem.Rad2Deg >= minAltDeg &&
				ephem.Separation(p.OfDate, sun.OfDate)*ephem.Rad2Deg >= minElongDeg
			switch {
			case ok && !open:
				wins = append(wins, TimeWindow{Start: at})
				open = true
			case !ok && open:
				wins[len(wins)-1].End = at
				open = false
			}
		}
		if open {
			wins[len(wins)-1].End = start.Add(24 * time.Hour)
		}
		got := out.Nights[n].Windows
		if len(got) != len(wins) {
			t.Errorf("night %d: outlook windows %v, brute force %v", n, got, wins)
			continue
		}
		for k := range wins {
			if d := got[k].Start.Sub(wins[k].Start); d > edgeTol || d < -edgeTol {
				t.Errorf("night %d: window starts %v, brute force %v", n, got[k].Start, wins[k].Start)
			}
			if d := got[k].End.Sub(wins[k].End); d > edgeTol || d < -edgeTol {
				t.Errorf("night %d: window ends %v, brute force %v", n, got[k].End, wins[k].End)
			}
		}
		if len(wins) > 0 {
			if bruteFirst < 0 {
				bruteFirst = n
			}
			bruteLast = n
		}
		nt := out.Nights[n]
		if len(wins) > 0 {
			t.Logf("%s: %s-%s UTC, best alt %.1f at %s, elong %.1f, mag %.1f, sky %.1f", nt.Date.Format("01-02"),
				got[0].Start.UTC().Format("15:04"), got[0].End.UTC().Format("15:04"), nt.Best.AltDeg,
				nt.Best.Time.UTC().Format("15:04"), nt.Best.SolarElongDeg, nt.Best.Magnitude, nt.Best.SkyMagArcsec2)
		} else {
			t.Logf("%s: none (%v), best alt %.1f, elong %.1f", nt.Date.Format("01-02"), nt.Reason, nt.Best.AltDeg, nt.Best.SolarElongDeg)
		}
	}
	if out.First != bruteFirst || out.Last != bruteLast {
		t.Errorf("first/last night %d/%d, brute force %d/%d", out.First, out.Last, bruteFirst, bruteLast)
	}
	if bruteLast < 0 || bruteLast == nights-1 {
		t.Errorf("the scan should end the apparition inside the %d nights (last good night %d)", nights, bruteLast)
	}
	// The night after the last good one: at its best the comet is above
	// the horizon but under the 5 deg floor.
	if r := out.Nights[bruteLast+1].Reason; r != ReasonAltitudeLow {
		t.Errorf("night after the last good one: reason %v, want %v", r, ReasonAltitudeLow)
	}
}

// TestOutlookRefusals: bad night counts and steps are refused.
func TestOutlookRefusals(t *testing.T) {
	o, _ := ephem.NewObserver(44, 5, 0)
	site := NewSite(o)
	tg := outlookComet(t)
	for _, c := range []struct {
		nights int
		step   time.Duration
	}{{0, 0}, {MaxOutlookNights + 1, 0}, {1, time.Second}, {1, 2 * time.Hour}} {
		if _, err := ApparitionOutlook(site, tg, time.Now(), c.nights, Request{}, c.step); err == nil {
			t.Errorf("nights %d, step %v accepted", c.nights, c.step)
		}
	}
}
