package ephem

import (
	"errors"
	"math"
	"testing"
)

// fuzzMaxDays is the time range over which FuzzOrbit demands finite
// results.
const fuzzMaxDays = 1e5

// FuzzOrbit: for any elements (q, e, i, node, peri) and time dt from
// perihelion, either Validate rejects the orbit with the sentinel that an
// independent classification predicts, or State and Observe return finite
// numbers (for |dt| <= 1e5 days), r never falls below q, and the universal
// Kepler equation is satisfied to rounding.
func FuzzOrbit(f *testing.F) {
	f.Add(1.0, 0.5, 10.0, 20.0, 30.0, 100.0)
	f.Add(0.3, 1.0, 95.0, 200.0, 10.0, -3000.0)
	f.Add(2.5, 1000.0, 180.0, 0.0, 359.0, 1e5)
	f.Add(0.005, 0.99999, 144.0, 0.0, 80.0, 0.001)
	f.Add(0.0, 0.5, 10.0, 20.0, 30.0, 1.0)
	f.Add(1.0, -0.1, 10.0, 20.0, 30.0, 1.0)
	f.Fuzz(func(t *testing.T, q, e, inc, node, peri, dt float64) {
		o := Orbit{QAU: q, E: e, IncDeg: inc, NodeDeg: node, PeriDeg: peri, PerihelionTT: JD{2460000.5, 0.125},
			Law: MagAsteroid, H: 12, G: 0.15}
		finite := func(v float64) bool { return !math.IsNaN(v) && !math.IsInf(v, 0) }
		var want error
		switch {
		case !finite(q) || !finite(e) || !finite(inc) || !finite(node) || !finite(peri):
			want = ErrNotFinite
		case !(q >= minPerihelionAU && q <= maxPerihelionAU):
			want = ErrPerihelion
		case !(e >= 0 && e <= maxEccentricity):
			want = ErrEccentricity
		case math.Sqrt(muSun*(1+e)/q) >= LightAUPerDay:
			want = ErrSuperluminal
		case !(inc >= 0 && inc <= 180):
			want = ErrInclination
		}
		c, err := NewConic(o)
		if want != nil || err != nil {
			if !errors.Is(err, want) || c != nil {
				t.Fatalf("NewConic(%+v) = %v, %v; want error %v", o, c, err, want)
			}
			return
		}
		if !finite(dt) || math.Abs(dt) > fuzzMaxDays {
			return
		}
		tt := o.PerihelionTT.AddDays(dt)
		p, v := c.State(tt)
		for i := 0; i < 3; i++ {
			if !finite(p[i]) || !finite(v[i]) {
				t.Fatalf("State(%+v, dt=%g) = %v, %v", o, dt, p, v)
			}
		}
		if r := p.Norm(); r < q*(1-1e-12) {
			t.Fatalf("r = %g below q = %g (dt=%g)", r, q, dt)
		}
		// Kepler's equation at the solution, reduced as state does.
		tr := dt
		if c.per > 0 && math.Abs(tr) > c.per/2 {
			tr -= c.per * math.Round(tr/c.per)
		}
		s, g := c.solve(math.Abs(tr), 0)
		res := c.q*s + c.muE*g.g3 - math.Abs(tr)
		scale := math.Abs(tr) + c.q*math.Abs(s) + c.muE*math.Abs(g.g3)
		if math.Abs(res) > 1e-12*scale {
			t.Fatalf("Kepler residual %g of %g (e=%g q=%g dt=%g s=%g)", res, scale, e, q, dt, s)
		}
		// An Earth-like observer 1 AU from the Sun, moving at 30 km/s.
		ep := Vec3{0.6, -0.7, 0.3}.Unit()
		ev := Vec3{0.7, 0.6, 0}.Unit().Scale(0.0172)
		w := c.Observe(tt, ep, ev, Vec3{}, Vec3{})
		for i, x := range []float64{w.Astrometric[0], w.Astrometric[1], w.Astrometric[2], w.DeltaAU, w.RAU,
			w.PhaseRad, w.ElongRad, w.Magnitude, w.RateRA, w.RateDec} {
			if !finite(x) {
				t.Fatalf("Observe(%+v, dt=%g): field %d = %g (%+v)", o, dt, i, x, w)
			}
		}
	})
}
