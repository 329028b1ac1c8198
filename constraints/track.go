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
// few products, two square roots and two short polynomials (altitude,
// azimuth), with no allocation and no call except the sky model: the
// tables of refraction and airmass (ephem.AirTables) and the polynomials
// inline. The separations from the Moon and the Sun are smooth in time away
// from 0 and 180 deg, so they are computed exactly at the ends and middle
// of every sepWindow and read between from the parabola through those
// three values (see sepWindow for its error); a window where the Moon or
// the Sun comes within sepGuard of the target or its antipode is computed
// at every step.
func (g *Grid) trackStar(tr *Track, st *ephem.Star, refresh int) {
	n := g.N
	// Proper motion over one grid is far below the float32 precision.
	u := st.Direction(g.Snap[n/2].TT)
	obs := &g.Site.Observer
	air := obs.AirTables()
	sinLat, cosLat := math.Sincos(obs.LatRad)
	nan := float32(math.NaN())
	inf := float32(math.Inf(1))
	last, cosL, sinL := g.last[:n], g.cosLAST[:n], g.sinLAST[:n]
	alt32, az32, ha32, dec32 := tr.Alt[:n], tr.Az[:n], tr.HA[:n], tr.Dec[:n]
	x32, ms32, ss32, sky32 := tr.Airmass[:n], tr.MoonSep[:n], tr.SunSep[:n], tr.Sky[:n]
	sky := g.sky
	win := min(g.sepWindowSteps(), starChunk)
	var hxs, hys, h0s, h2s, alts [starChunk]float64 // one window's stages
	var seps sepFit
	// sin(belowHorizonSkip): a window whose steps all lie under it needs
	// no separations.
	sinSkip := math.Sin(belowHorizonSkip)
	for i0 := 0; i0 < n; i0 += refresh {
		i1 := min(i0+refresh, n)
		// The unit vector of date is (cos d cos ra, cos d sin ra, sin d):
		// cos d cos H = cL*a + sL*b and cos d sin H = sL*a - cL*b with
		// H = LAST - ra, L = LAST, and no trigonometry for a, b, sin d.
		v := g.Local[i0].StarOfDate(u)
		a, b, sinDec := v[0], v[1], v[2]
		ra, dec := math.Atan2(b, a), math.Asin(clamp(sinDec, -1, 1))
		zc, zs := cosLat*sinDec, sinLat*sinDec // the declination's share of h[0], h[2]
		d32 := float32(dec)
		for j0 := i0; j0 < i1; j0 += win {
			j1 := min(j0+win, i1)
			// Stage by stage over a window (structure of arrays): each
			// loop's steps are independent, so the processor overlaps
			// them instead of waiting on one step's chain of altitude,
			// refraction and airmass.
			up := false // any step above belowHorizonSkip
			for i := j0; i < j1; i++ {
				k := i - j0
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
				hxs[k], hys[k], h0s[k], h2s[k] = hx, hy, h0, h2
				up = up || h2 > sinSkip
				// atan2Fast(hy, h0) with its octants reduced here, so
				// that only its polynomial (atanUnit) is inlined.
				ax, ay := math.Abs(h0), math.Abs(hy)
				var az float64
				if ax == 0 && ay == 0 {
					az = atan2Fast(hy, h0) // the zenith
				} else {
					swap := ay > ax
					lo, hi := ay, ax
					if swap {
						lo, hi = ax, ay
					}
					az = atanUnit(lo / hi)
					if swap {
						az = math.Pi/2 - az
					}
					if h0 < 0 {
						az = math.Pi - az
					}
					if math.Signbit(hy) {
						az = -az
					}
				}
				if az < 0 {
					az += 2 * math.Pi
				}
				az32[i], ha32[i], dec32[i] = float32(az), float32(ha), d32
			}
			for k := range j1 - j0 {
				alts[k] = math.Pi/2 - acosFast(clamp(h2s[k], -1, 1)) // asinFast, which does not inline
			}
			fit := false
			if up {
				fit = g.sepParabolas(&seps, j0, j1, a, b, sinDec)
			}
			for i := j0; i < j1; i++ {
				k := i - j0
				alt, h0, hy, h2 := alts[k], h0s[k], hys[k], h2s[k]
				if alt < belowHorizonSkip {
					alt32[i], x32[i] = float32(alt), inf
					ms32[i], ss32[i], sky32[i] = nan, nan, nan
					continue
				}
				r := air.Refraction(alt)
				app := alt + r
				cosAlt := math.Sqrt(h0*h0 + hy*hy)
				sinApp := h2*(1-r*r/2) + cosAlt*r
				x := air.AirmassSin(sinApp, app*ephem.Rad2Deg)
				alt32[i], x32[i] = float32(app), float32(x)
				var ms, ss float64
				if fit {
					t := float64(k)
					ms = seps.moon[0] + t*(seps.moon[1]+t*seps.moon[2])
					ss = seps.sun[0] + t*(seps.sun[1]+t*seps.sun[2])
				} else {
					ms, ss = g.starSeps(i, hxs[k], hy, sinDec)
				}
				ms32[i], ss32[i] = float32(ms), float32(ss)
				if sky == nil {
					sky32[i] = nan
					continue
				}
				sky32[i] = float32(sky[i].atSin(max(sinApp, 0), ms, ss, true))
			}
		}
	}
}

// starChunk is the most steps of one window that trackStar takes through
// its stages (its scratch arrays live on the stack).
const starChunk = 64

// sepWindow is the span over which trackStar reads a fixed target's
// separations from a parabola. Over 15 min the Moon moves against the stars
// by at most 0.2 deg (0.55 deg/h in its orbit, up to 0.25 deg/h more from
// the diurnal change of its parallax); with the separation at least
// sepGuard from 0 and 180 deg, the third derivative of the separation is at
// most v^3/sin^2(sep) = 4e-4 rad/h^3, so the parabola through the ends and
// middle is off by under 5e-8 rad (0.01 arcsec) between, below a float32
// track value's 1e-7 rad; the Sun moves 25 times slower. TestTrackStarSeps
// measures it against the separation at every step.
const sepWindow = 15 * time.Minute

// sepGuard is how close to 0 or 180 deg the Moon or the Sun may come in a
// window before its separations are computed at every step (the
// separation's kink at 0 defeats any parabola).
const sepGuard = 5 * ephem.Deg2Rad

// sepWindowSteps is sepWindow in grid steps (at least 1).
func (g *Grid) sepWindowSteps() int {
	return max(int(sepWindow/g.Step), 1)
}

// starSeps returns the separations (radians) of the Moon and the Sun at
// step i from a fixed target whose hour-angle-frame direction is (hx,
// -hy, sinDec) (trackStar's hx, hy).
func (g *Grid) starSeps(i int, hx, hy, sinDec float64) (moon, sun float64) {
	moon = acosFast(hx*g.moonX[i] + hy*g.moonY[i] + sinDec*g.moonZ[i])
	sun = acosFast(hx*g.sunX[i] + hy*g.sunY[i] + sinDec*g.sunZ[i])
	return moon, sun
}

// sepFit holds the parabolas c0 + c1 t + c2 t^2 (t in steps from the
// window's first) of a window's Moon and Sun separations.
type sepFit struct{ moon, sun [3]float64 }

// sepParabolas sets f to the parabolas through the Moon's and the Sun's
// separations at steps j0, the middle and j1-1 of a fixed target
// (trackStar's a, b, sinDec) and reports whether to use them: not for
// windows of fewer than three steps, nor within sepGuard of 0 or 180 deg.
func (g *Grid) sepParabolas(f *sepFit, j0, j1 int, a, b, sinDec float64) bool {
	l := j1 - 1 - j0
	if l < 2 {
		return false
	}
	mid := l / 2
	var ms, ss [3]float64
	for k, i := range [3]int{j0, j0 + mid, j1 - 1} {
		hx := g.cosLAST[i]*a + g.sinLAST[i]*b
		hy := -(g.sinLAST[i]*a - g.cosLAST[i]*b)
		ms[k], ss[k] = g.starSeps(i, hx, hy, sinDec)
		if !(min(ms[k], ss[k]) > sepGuard && max(ms[k], ss[k]) < math.Pi-sepGuard) {
			return false
		}
	}
	// Divided differences on the nodes 0, mid, l.
	fm, fl, flm := float64(mid), float64(l), float64(l-mid)
	im, il, ilm := 1/fm, 1/fl, 1/flm
	d1 := (ms[1] - ms[0]) * im
	c2 := ((ms[2]-ms[0])*il - d1) * ilm
	f.moon = [3]float64{ms[0], d1 - c2*fm, c2}
	d1 = (ss[1] - ss[0]) * im
	c2 = ((ss[2]-ss[0])*il - d1) * ilm
	f.sun = [3]float64{ss[0], d1 - c2*fm, c2}
	return true
}

// starRefreshSteps is starRefresh in grid steps (at least 1).
func (g *Grid) starRefreshSteps() int {
	return max(int(starRefresh/g.Step), 1)
}
