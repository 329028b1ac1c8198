package catalogue

import (
	"errors"
	"math"
	"time"

	"github.com/nightloom/nightloom/ephem"
)

// ErrFieldTooWide reports a track too long for one finder chart.
var ErrFieldTooWide = errors.New("catalogue: the track spans more than 60 deg; chart fewer nights")

// MaxFieldRadiusDeg is the largest finder-chart radius: beyond it the
// gnomonic projection stretches the edges by more than a third.
const MaxFieldRadiusDeg = 30.0

// TrackPoint is one position of a moving target (ICRS astrometric, deg).
type TrackPoint struct {
	Time          time.Time
	RADeg, DecDeg float64
}

// Projected is a catalogue entry on the chart plane.
type Projected struct {
	Entry *Entry
	// X, Y are gnomonic standard coordinates in degrees: X toward east
	// (increasing RA), Y toward north.
	X, Y float64
}

// Field is what a finder chart shows: the tangent point, the radius, the
// stars and deep-sky objects inside, and the track projected.
type Field struct {
	CenterRADeg, CenterDecDeg, RadiusDeg float64
	Stars, DeepSky                       []Projected
	// TrackX, TrackY: the track's points projected, in order.
	TrackX, TrackY []float64
}

// Gnomonic returns the standard coordinates (deg) of ra, dec on the plane
// tangent at ra0, dec0 (all deg), and false on the far hemisphere (Calabretta
// & Greisen 2002, A&A 395, 1077, the TAN projection).
func Gnomonic(ra0, dec0, ra, dec float64) (x, y float64, ok bool) {
	a0, d0, a, d := ra0*ephem.Deg2Rad, dec0*ephem.Deg2Rad, ra*ephem.Deg2Rad, dec*ephem.Deg2Rad
	sd0, cd0 := math.Sincos(d0)
	sd, cd := math.Sincos(d)
	sda, cda := math.Sincos(a - a0)
	cosc := sd0*sd + cd0*cd*cda
	if cosc <= 0 {
		return 0, 0, false
	}
	x = cd * sda / cosc
	y = (cd0*sd - sd0*cd*cda) / cosc
	return x * ephem.Rad2Deg, y * ephem.Rad2Deg, true
}

// Finder lays out a finder chart around a track: centred on the track's
// mean direction, with a radius reaching its farthest point plus marginDeg
// (at least minRadiusDeg), stars to starLimit and deep-sky objects to
// dsoLimit (visual magnitudes) inside it.
func (c *Catalogue) Finder(track []TrackPoint, marginDeg, minRadiusDeg, starLimit, dsoLimit float64) (Field, error) {
	if len(track) == 0 {
		return Field{}, errors.New("catalogue: empty track")
	}
	var sum ephem.Vec3
	vecs := make([]ephem.Vec3, len(track))
	for i, p := range track {
		vecs[i] = ephem.SphericalToVec(p.RADeg*ephem.Deg2Rad, p.DecDeg*ephem.Deg2Rad)
		sum = sum.Add(vecs[i])
	}
	if sum.Norm() < 1e-9 {
		return Field{}, ErrFieldTooWide
	}
	lon, lat, _ := ephem.VecToSpherical(sum)
	f := Field{CenterRADeg: lon * ephem.Rad2Deg, CenterDecDeg: lat * ephem.Rad2Deg}
	far := 0.0
	for _, v := range vecs {
		far = math.Max(far, ephem.Separation(v, sum)*ephem.Rad2Deg)
	}
	f.RadiusDeg = math.Max(far+marginDeg, minRadiusDeg)
	if f.RadiusDeg > MaxFieldRadiusDeg {
		return Field{}, ErrFieldTooWide
	}
	for _, p := range track {
		x, y, _ := Gnomonic(f.CenterRADeg, f.CenterDecDeg, p.RADeg, p.DecDeg)
		f.TrackX, f.TrackY = append(f.TrackX, x), append(f.TrackY, y)
	}
	// The chart is square: keep what falls inside the square around the
	// circle of the radius (its corners too).
	for i := range c.Entries {
		e := &c.Entries[i]
		lim := starLimit
		if e.Kind == KindDeepSky {
			lim = dsoLimit
		}
		if !e.HasMag || e.Mag > lim {
			continue
		}
		x, y, ok := Gnomonic(f.CenterRADeg, f.CenterDecDeg, e.RADeg, e.DecDeg)
		if !ok || math.Abs(x) > f.RadiusDeg || math.Abs(y) > f.RadiusDeg {
			continue
		}
		if e.Kind == KindStar {
			f.Stars = append(f.Stars, Projected{e, x, y})
		} else {
			f.DeepSky = append(f.DeepSky, Projected{e, x, y})
		}
	}
	return f, nil
}

// Crossing is a moving target passing from one constellation to the next.
type Crossing struct {
	// Between: the crossing happens after the first instant and no later
	// than the second (consecutive track points).
	After, By time.Time
	From, To  Constellation
}

// Crossings lists the constellation changes along a track, in order. The
// caller chooses the track's sampling; a crossing is located to within one
// sampling step.
func (c *Catalogue) Crossings(track []TrackPoint) []Crossing {
	var out []Crossing
	for i := 1; i < len(track); i++ {
		a := c.ConstellationOf(track[i-1].RADeg, track[i-1].DecDeg)
		b := c.ConstellationOf(track[i].RADeg, track[i].DecDeg)
		if a != b {
			out = append(out, Crossing{After: track[i-1].Time, By: track[i].Time, From: a, To: b})
		}
	}
	return out
}

// Boundaries samples the field on an n x n grid of the chart plane and
// returns the points where the constellation changes between neighbouring
// samples (to draw the boundaries as dotted lines, to within one grid step)
// and, for every constellation present, the mean position of its samples
// (to place its label).
func (c *Catalogue) Boundaries(f Field, n int) (xs, ys []float64, labels map[string][2]float64) {
	if n < 2 {
		return nil, nil, nil
	}
	step := 2 * f.RadiusDeg / float64(n-1)
	grid := make([]string, n*n)
	c0, s0 := math.Cos(f.CenterDecDeg*ephem.Deg2Rad), math.Sin(f.CenterDecDeg*ephem.Deg2Rad)
	sums := map[string][3]float64{}
	for j := 0; j < n; j++ {
		for i := 0; i < n; i++ {
			x, y := -f.RadiusDeg+float64(i)*step, -f.RadiusDeg+float64(j)*step
			// Inverse gnomonic (Calabretta & Greisen 2002).
			xr, yr := x*ephem.Deg2Rad, y*ephem.Deg2Rad
			den := c0 - yr*s0
			ra := f.CenterRADeg + math.Atan2(xr, den)*ephem.Rad2Deg
			dec := math.Atan2(s0+yr*c0, math.Hypot(xr, den)) * ephem.Rad2Deg
			ra = math.Mod(ra+360, 360)
			k := c.ConstellationOf(ra, dec).Abbr
			grid[j*n+i] = k
			s := sums[k]
			sums[k] = [3]float64{s[0] + x, s[1] + y, s[2] + 1}
		}
	}
	for j := 0; j < n; j++ {
		for i := 0; i < n; i++ {
			k := grid[j*n+i]
			if (i+1 < n && grid[j*n+i+1] != k) || (j+1 < n && grid[(j+1)*n+i] != k) {
				xs = append(xs, -f.RadiusDeg+(float64(i)+0.5)*step)
				ys = append(ys, -f.RadiusDeg+(float64(j)+0.5)*step)
			}
		}
	}
	labels = map[string][2]float64{}
	for k, s := range sums {
		labels[k] = [2]float64{s[0] / s[2], s[1] / s[2]}
	}
	return xs, ys, labels
}
