package constraints

import (
	"math"
	"math/rand/v2"
	"testing"
	"time"

	"github.com/nightloom/nightloom/ephem"
)

// TestTrackStarSeps checks trackStar against trackStarExact, the same
// computation with every quantity at every step (the grid's code before the
// separations were read from parabolas; no outside reference: the outside
// checks of the separations are TestSeparationsAgainstReference's). Targets
// are random, plus some placed near the Moon, on grids of 10 s, 1 min and
// 5 min at three latitudes. Everything but the separations and the sky must
// agree bit for bit; the separations within sepTol, the sky within skyTol.
func TestTrackStarSeps(t *testing.T) {
	const (
		sepTol = 3e-7 // rad (0.06 arcsec): sepWindow's 5e-8 plus one float32 step (2.4e-7 rad from 2 rad up)
		skyTol = 1e-5 // mag/arcsec^2
	)
	rng := rand.New(rand.NewPCG(3, 4))
	worstSep, worstSky := 0.0, 0.0
	for _, c := range []struct {
		lat   float64
		start time.Time
		step  time.Duration
	}{
		{46.5, time.Date(2026, 12, 24, 17, 0, 0, 0, time.UTC), time.Minute},
		{-30.2, time.Date(2027, 3, 4, 22, 0, 0, 0, time.UTC), 10 * time.Second},
		{65, time.Date(2027, 1, 2, 14, 0, 0, 0, time.UTC), 5 * time.Minute},
	} {
		o, err := ephem.NewObserver(c.lat, 7.4, 1400)
		if err != nil {
			t.Fatal(err)
		}
		site := NewSite(o)
		end := c.start.Add(12 * time.Hour)
		if c.step < time.Minute {
			end = c.start.Add(3 * time.Hour)
		}
		g, err := NewGrid(site, c.start, end, c.step, Options{})
		if err != nil {
			t.Fatal(err)
		}
		moonRA, moonDec, _ := ephem.VecToSpherical(g.MoonDir[g.N/2])
		var targets []*Target
		for k := 0; k < 150; k++ {
			ra, dec := rng.Float64()*360, -90+rng.Float64()*180
			if k < 30 { // near the Moon: within a few degrees of its path
				ra = moonRA*ephem.Rad2Deg + (rng.Float64()-0.5)*16
				dec = moonDec*ephem.Rad2Deg + (rng.Float64()-0.5)*16
			}
			st, err := ephem.NewStar(math.Mod(ra+360, 360), max(min(dec, 90), -90), 0, 0)
			if err != nil {
				t.Fatal(err)
			}
			targets = append(targets, &Target{Star: &st})
		}
		for _, tg := range targets {
			got, err := g.Track(tg)
			if err != nil {
				t.Fatal(err)
			}
			want, _ := g.Track(tg)
			g.trackStarExact(want, tg.Star, g.starRefreshSteps())
			for i := 0; i < g.N; i++ {
				for _, f := range []struct {
					name      string
					got, want float32
				}{{"Alt", got.Alt[i], want.Alt[i]}, {"Az", got.Az[i], want.Az[i]}, {"HA", got.HA[i], want.HA[i]},
					{"Dec", got.Dec[i], want.Dec[i]}, {"Airmass", got.Airmass[i], want.Airmass[i]}} {
					if f.got != f.want && !(f.got != f.got && f.want != f.want) {
						t.Fatalf("lat %v step %d: %s %v, want %v (bit for bit)", c.lat, i, f.name, f.got, f.want)
					}
				}
				if math.IsNaN(float64(want.MoonSep[i])) {
					if !math.IsNaN(float64(got.MoonSep[i])) || !math.IsNaN(float64(got.SunSep[i])) {
						t.Fatalf("lat %v step %d: separations %v %v, want NaN", c.lat, i, got.MoonSep[i], got.SunSep[i])
					}
					continue
				}
				d := max(math.Abs(float64(got.MoonSep[i]-want.MoonSep[i])), math.Abs(float64(got.SunSep[i]-want.SunSep[i])))
				worstSep = max(worstSep, d)
				worstSky = max(worstSky, math.Abs(float64(got.Sky[i]-want.Sky[i])))
				if d > sepTol {
					t.Errorf("lat %v step %d: separations Moon %v Sun %v, want %v %v (+- %g rad)",
						c.lat, i, got.MoonSep[i], got.SunSep[i], want.MoonSep[i], want.SunSep[i], sepTol)
				}
			}
		}
	}
	t.Logf("worst separation difference %.3g rad (%.4f arcsec), sky %.3g mag", worstSep, worstSep*ephem.Rad2Deg*3600, worstSky)
	if worstSky > skyTol {
		t.Errorf("sky differs by up to %g mag, want <= %g", worstSky, skyTol)
	}
}

// trackStarExact is trackStar with every quantity computed at every step
// (the reference of TestTrackStarSeps).
func (g *Grid) trackStarExact(tr *Track, st *ephem.Star, refresh int) {
	n := g.N
	// Proper motion over one grid is far below the float32 precision.
	u := st.Direction(g.Snap[n/2].TT)
	obs := &g.Site.Observer
	sinLat, cosLat := math.Sincos(obs.LatRad)
	nan := float32(math.NaN())
	inf := float32(math.Inf(1))
	last, cosL, sinL := g.last[:n], g.cosLAST[:n], g.sinLAST[:n]
	mx, my, mz := g.moonX[:n], g.moonY[:n], g.moonZ[:n]
	sx, sy, sz := g.sunX[:n], g.sunY[:n], g.sunZ[:n]
	alt32, az32, ha32, dec32 := tr.Alt[:n], tr.Az[:n], tr.HA[:n], tr.Dec[:n]
	x32, ms32, ss32, sky32 := tr.Airmass[:n], tr.MoonSep[:n], tr.SunSep[:n], tr.Sky[:n]
	sky := g.sky
	for i0 := 0; i0 < n; i0 += refresh {
		i1 := min(i0+refresh, n)
		ra, dec, _ := ephem.VecToSpherical(g.Local[i0].StarOfDate(u))
		sinDec, cosDec := math.Sincos(dec)
		sr, cr := math.Sincos(ra)
		// cos d cos H = cL*a + sL*b and cos d sin H = sL*a - cL*b with
		// H = LAST - ra, L = LAST.
		a, b := cosDec*cr, cosDec*sr
		zc, zs := cosLat*sinDec, sinLat*sinDec // the declination's share of h[0], h[2]
		d32 := float32(dec)
		for i := i0; i < i1; i++ {
			hx := cosL[i]*a + sinL[i]*b    // cos d cos H
			hy := -(sinL[i]*a - cosL[i]*b) // -cos d sin H
			ha := last[i] - ra
			if ha > math.Pi {
				ha -= 2 * math.Pi
			} else if ha <= -math.Pi {
				ha += 2 * math.Pi
			}
			// Observer.HADecToHorizon, inlined: (north, east, up).
			h0 := -sinLat*hx + zc
			h2 := cosLat*hx + zs
			alt := asinFast(clamp(h2, -1, 1))
			az := atan2Fast(hy, h0)
			if az < 0 {
				az += 2 * math.Pi
			}
			az32[i], ha32[i], dec32[i] = float32(az), float32(ha), d32
			if alt < belowHorizonSkip {
				alt32[i], x32[i] = float32(alt), inf
				ms32[i], ss32[i], sky32[i] = nan, nan, nan
				continue
			}
			r := obs.RefractionFast(alt)
			app := alt + r
			cosAlt := math.Sqrt(h0*h0 + hy*hy)
			sinApp := h2*(1-r*r/2) + cosAlt*r
			x := ephem.AirmassSin(sinApp, app*ephem.Rad2Deg)
			alt32[i], x32[i] = float32(app), float32(x)
			ms := acosFast(hx*mx[i] + hy*my[i] + sinDec*mz[i])
			ss := acosFast(hx*sx[i] + hy*sy[i] + sinDec*sz[i])
			ms32[i], ss32[i] = float32(ms), float32(ss)
			if sky == nil {
				sky32[i] = nan
				continue
			}
			sky32[i] = float32(sky[i].atSin(max(sinApp, 0), ms, ss, true))
		}
	}
}
