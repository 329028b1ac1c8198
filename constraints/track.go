package constraints

import (
	"errors"
	"math"
	"time"

	"github.com/nightloom/nightloom/ephem"
)

// Target is something to point at: a fixed star (ICRS place with optional
// proper motion) or a moving body: a small body on a conic orbit
// (*ephem.Conic), a planet or the Moon (ephem.NewBody). Everything
// downstream treats every moving body alike.
type Target struct {
	Name  string
	Star  *ephem.Star
	Orbit ephem.Mover
}

// ErrTarget reports a target that is neither fixed nor orbit, or both.
var ErrTarget = errors.New("constraints: target must be exactly one of fixed or orbit")

// Moving reports whether the target moves against the stars.
func (t *Target) Moving() bool { return t.Orbit != nil }

// Track is one target sampled on a grid. Angles are radians; values are
// float32 (1e-7 rad = 0.02 arcsec) to keep 1000 targets x 720 steps small.
type Track struct {
	Target *Target
	// Alt is the apparent (refracted) altitude, Az the azimuth.
	Alt, Az []float32
	// HA is the local apparent hour angle (east negative), Dec the
	// apparent declination of date.
	HA, Dec []float32
	// Airmass is Kasten & Young's (+Inf below the horizon).
	Airmass []float32
	// MoonSep and SunSep are topocentric angular distances.
	MoonSep, SunSep []float32
	// Sky is the predicted V sky brightness at the target (mag/arcsec^2);
	// NaN below the horizon or when the grid skips the sky model.
	Sky []float32
	// Mag (with extinction k*X), RateRA and RateDec (arcsec/min,
	// RA*cos(dec) and Dec) are set for orbit targets only.
	Mag, RateRA, RateDec []float32
}

// starRefresh is how often a fixed target's apparent place is recomputed.
const starRefresh = time.Hour

// belowHorizonSkip is the altitude under which a step is not worth the
// sky-brightness model (no horizon profile goes below -5 deg).
const belowHorizonSkip = -5 * ephem.Deg2Rad

// Track samples a target on the grid.
func (g *Grid) Track(t *Target) (*Track, error) {
	if (t.Star == nil) == (t.Orbit == nil) {
		return nil, ErrTarget
	}
	n := g.N
	refresh := g.starRefreshSteps()
	buf := make([]float32, 8*n)
	tr := &Track{Target: t,
		Alt: buf[0*n : 1*n], Az: buf[1*n : 2*n], HA: buf[2*n : 3*n], Dec: buf[3*n : 4*n],
		Airmass: buf[4*n : 5*n], MoonSep: buf[5*n : 6*n], SunSep: buf[6*n : 7*n], Sky: buf[7*n : 8*n]}
	if t.Orbit != nil {
		ob := make([]float32, 3*n)
		tr.Mag, tr.RateRA, tr.RateDec = ob[:n], ob[n:2*n], ob[2*n:]
	}
	if t.Star != nil {
		g.trackStar(tr, t.Star, refresh)
		return tr, nil
	}
	obs := &g.Site.Observer
	k := g.Site.Sky.ExtinctionV
	nan := float32(math.NaN())
	for i := 0; i < n; i++ {
		l := &g.Local[i]
		var hd ephem.Vec3 // direction in the local hour-angle frame
		var ha float64
		{ // orbit targets: light time, aberration and parallax at every step
			ofDate, view := l.OrbitView(t.Orbit)
			hd = l.OfDateToHADec.MulVec(ofDate)
			ha = math.Atan2(-hd[1], hd[0])
			tr.RateRA[i], tr.RateDec[i] = float32(view.RateRA), float32(view.RateDec)
			tr.Mag[i] = float32(view.Magnitude) // extinction added below
		}
		h := obs.HADecToHorizon(hd)
		alt := asinFast(clamp(h[2], -1, 1))
		az := math.Atan2(h[1], h[0])
		if az < 0 {
			az += 2 * math.Pi
		}
		tr.Az[i] = float32(az)
		if alt < belowHorizonSkip {
			// Far below any horizon profile: only the hour angle and
			// declination (where the mount must slew from, if it tracked
			// the target down there) are needed.
			tr.Alt[i], tr.Airmass[i] = float32(alt), float32(math.Inf(1))
			tr.HA[i], tr.Dec[i] = float32(ha), float32(asinFast(clamp(hd[2], -1, 1)))
			tr.MoonSep[i], tr.SunSep[i], tr.Sky[i] = nan, nan, nan
			if tr.Mag != nil {
				tr.Mag[i] = nan
			}
			continue
		}
		r := obs.RefractionFast(alt)
		app := alt + r
		// sin(alt + r) from sin(alt) = h[2]; r < 0.7 deg, so the
		// second-order terms of the expansion are below 1e-10.
		cosAlt := math.Sqrt(h[0]*h[0] + h[1]*h[1])
		x := ephem.AirmassSin(h[2]*(1-r*r/2)+cosAlt*r, app*ephem.Rad2Deg)
		tr.Alt[i], tr.Airmass[i] = float32(app), float32(x)
		tr.HA[i] = float32(ha)
		tr.Dec[i] = float32(asinFast(clamp(hd[2], -1, 1)))
		ms := acosFast(hd.Dot(g.moonHD[i]))
		ss := acosFast(hd.Dot(g.sunHD[i]))
		tr.MoonSep[i], tr.SunSep[i] = float32(ms), float32(ss)
		if tr.Mag != nil && !math.IsInf(x, 0) {
			tr.Mag[i] += float32(k * x)
		}
		if g.sky == nil {
			tr.Sky[i] = nan
			continue
		}
		tr.Sky[i] = float32(g.sky[i].At(math.Max(app, 0), az, ms, ss))
	}
	return tr, nil
}

// trackStar samples a fixed target. Its apparent place of date (aberration,
// precession, nutation) drifts by under 0.02 arcsec in an hour, so it is
// refreshed every refresh steps and only the hour angle moves between. The
// hour angle's cosine and sine come from the grid's hoisted cos and sin of
// the sidereal time by the angle-difference identities, so a step costs a
// few products, two square roots and three short polynomials (altitude,
// azimuth, separations), with no allocation and no call that does not
// inline except the sky model and the tables of refraction and airmass.
func (g *Grid) trackStar(tr *Track, st *ephem.Star, refresh int) {
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

// starRefreshSteps is starRefresh in grid steps (at least 1).
func (g *Grid) starRefreshSteps() int {
	return max(int(starRefresh/g.Step), 1)
}
