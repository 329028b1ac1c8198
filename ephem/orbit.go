package ephem

import (
	"errors"
	"math"
)

// Two-body constants (the speed of light, LightAUPerDay, is in observer.go).
const (
	// gaussK is the Gaussian gravitational constant k (IAU 1976), so that
	// the Sun's mu = k^2 AU^3/day^2.
	gaussK = 0.01720209895
	// muSun is k^2, AU^3/day^2.
	muSun = gaussK * gaussK
)

// Limits that Validate enforces. They keep every intermediate quantity of
// the propagator finite (no overflow of velocities or mean motions); real
// comets and asteroids lie far inside them.
const (
	minPerihelionAU = 1e-6 // 150 km: well inside the Sun
	maxPerihelionAU = 1e6  // beyond the Oort cloud
	maxEccentricity = 1e4  // interstellar visitors have e of a few
)

// Validation errors of Orbit.
var (
	ErrEccentricity = errors.New("ephem: eccentricity must be within [0, 1e4]")
	ErrPerihelion   = errors.New("ephem: perihelion distance must be within [1e-6, 1e6] AU")
	ErrNotFinite    = errors.New("ephem: orbital elements and magnitude parameters must be finite")
	ErrInclination  = errors.New("ephem: inclination must be within [0, 180] deg")
	ErrMagLaw       = errors.New("ephem: unknown magnitude law")
	// ErrSuperluminal: the light-time equation has a unique solution (and
	// its iteration converges) only for bodies slower than light.
	ErrSuperluminal = errors.New("ephem: perihelion speed sqrt(mu (1+e)/q) must be below the speed of light")
)

// Orbit holds perihelion elements, J2000 ecliptic and equinox, of a body on
// an unperturbed heliocentric conic (elliptic, parabolic or hyperbolic).
type Orbit struct {
	QAU float64 // perihelion distance, AU
	E   float64 // eccentricity (>= 0; 1 is a parabola)
	// Inclination, longitude of the ascending node and argument of
	// perihelion, degrees, J2000 ecliptic.
	IncDeg, NodeDeg, PeriDeg float64
	// PerihelionTT is the time of perihelion passage, TT.
	PerihelionTT JD
	// Law picks the brightness law: M1, K1 for MagComet (magnitudes), H,
	// G for MagAsteroid (absolute magnitude and slope parameter).
	Law    MagLaw
	M1, K1 float64
	H, G   float64
}

// Validate reports the first problem with o: ErrNotFinite for a NaN or
// infinite field, ErrPerihelion, ErrEccentricity, ErrSuperluminal (q must
// exceed mu (1+e)/c^2, which binds only for e above about 100: 1e-4 AU at
// e = 1e4), ErrInclination or ErrMagLaw. Node and argument of perihelion
// may be any finite angle.
func (o Orbit) Validate() error {
	for _, v := range [...]float64{o.QAU, o.E, o.IncDeg, o.NodeDeg, o.PeriDeg,
		o.PerihelionTT.Hi, o.PerihelionTT.Lo, o.M1, o.K1, o.H, o.G} {
		if math.IsNaN(v) || math.IsInf(v, 0) {
			return ErrNotFinite
		}
	}
	switch {
	case o.QAU < minPerihelionAU || o.QAU > maxPerihelionAU:
		return ErrPerihelion
	case o.E < 0 || o.E > maxEccentricity:
		return ErrEccentricity
	case muSun*(1+o.E)/o.QAU >= LightAUPerDay*LightAUPerDay:
		return ErrSuperluminal
	case o.IncDeg < 0 || o.IncDeg > 180:
		return ErrInclination
	case o.Law != MagNone && o.Law != MagComet && o.Law != MagAsteroid:
		return ErrMagLaw
	}
	return nil
}

// Conic is an Orbit prepared for propagation: the perihelion state and the
// rotation to GCRS axes are computed once. It is immutable and safe for
// concurrent use.
type Conic struct {
	t0    JD      // perihelion time, TT
	q     float64 // perihelion distance, AU
	muE   float64 // mu*e
	beta  float64 // 2 mu/r - v^2 = mu (1-e)/q: > 0 ellipse, 0 parabola, < 0 hyperbola
	sqb   float64 // sqrt(|beta|)
	v0    float64 // speed at perihelion sqrt(mu (1+e)/q), AU/day
	e     float64
	per   float64 // period for beta > 0 (days), else 0
	pHat  Vec3    // unit vector Sun -> perihelion, GCRS axes
	qvHat Vec3    // unit vector along the perihelion velocity, GCRS axes

	law          MagLaw
	m1, k1, h, g float64
}

// NewConic validates o and prepares it for propagation.
func NewConic(o Orbit) (*Conic, error) {
	if err := o.Validate(); err != nil {
		return nil, err
	}
	c := &Conic{
		t0: o.PerihelionTT, q: o.QAU, e: o.E, muE: muSun * o.E,
		beta: muSun * (1 - o.E) / o.QAU,
		v0:   math.Sqrt(muSun * (1 + o.E) / o.QAU),
		law:  o.Law, m1: o.M1, k1: o.K1, h: o.H, g: o.G,
	}
	c.sqb = math.Sqrt(math.Abs(c.beta))
	if c.beta > 0 {
		// Mean motion n = beta^1.5/mu.
		c.per = 2 * math.Pi * muSun / (c.beta * c.sqb)
	}
	// Orbital-plane axes in the ecliptic frame: P toward perihelion, Q 90
	// deg ahead in the direction of motion (the Gaussian vectors, e.g.
	// Meeus, Astronomical Algorithms, 2nd ed., ch. 33).
	si, ci := math.Sincos(o.IncDeg * Deg2Rad)
	sn, cn := math.Sincos(math.Mod(o.NodeDeg, 360) * Deg2Rad)
	sw, cw := math.Sincos(math.Mod(o.PeriDeg, 360) * Deg2Rad)
	p := Vec3{cw*cn - sw*sn*ci, cw*sn + sw*cn*ci, sw * si}
	qv := Vec3{-sw*cn - cw*sn*ci, -sw*sn + cw*cn*ci, cw * si}
	c.pHat = EclipticJ2000ToGCRS.MulVec(p)
	c.qvHat = EclipticJ2000ToGCRS.MulVec(qv)
	return c, nil
}

// stumpffG holds the universal functions G_n(s) = s^n c_n(beta s^2) at one
// value of the universal anomaly s.
type stumpffG struct{ g0, g1, g2, g3 float64 }

// gFuncs evaluates G0..G3 at s for the orbit's beta. Stumpff functions
// c_n(x), x = beta s^2, by their power series for |x| < 1 (ten terms reach
// double precision) and by the closed forms in sin/cos (x > 0) or sinh/cosh
// (x < 0) beyond (Danby, Fundamentals of Celestial Mechanics, 2nd ed.,
// sec. 6.9; Stumpff, Himmelsmechanik I, 1959).
func (c *Conic) gFuncs(s float64) stumpffG {
	s2 := s * s
	x := c.beta * s2
	switch {
	case x < 1 && x > -1:
		// c2 = sum (-x)^k/(2k+2)!, c3 = sum (-x)^k/(2k+3)!, k = 0..9, by
		// Estrin's scheme (pairs, then powers x^2, x^4, x^8) to shorten
		// the chain of dependent multiplications.
		x2 := x * x
		x4 := x2 * x2
		x8 := x4 * x4
		c2 := (1.0/2 - x*(1.0/24) + x2*(1.0/720-x*(1.0/40320))) +
			x4*((1.0/3628800-x*(1.0/479001600))+x2*(1.0/87178291200-x*(1.0/20922789888000))) +
			x8*(1.0/6402373705728000-x*(1.0/2432902008176640000))
		c3 := (1.0/6 - x*(1.0/120) + x2*(1.0/5040-x*(1.0/362880))) +
			x4*((1.0/39916800-x*(1.0/6227020800))+x2*(1.0/1307674368000-x*(1.0/355687428096000))) +
			x8*(1.0/121645100408832000-x*(1.0/51090942171709440000))
		return stumpffG{1 - x*c2, s * (1 - x*c3), s2 * c2, s2 * s * c3}
	case x > 0:
		y := math.Sqrt(x)
		sy, cy := math.Sincos(y)
		// G1 = sin(y)/sqrt(beta), G2 = (1-cos y)/beta, G3 = (s - G1)/beta.
		g1 := sy / c.sqb
		if s < 0 {
			g1 = -g1
		}
		return stumpffG{cy, g1, (1 - cy) / c.beta, (s - g1) / c.beta}
	default:
		y := math.Sqrt(-x)
		ey := math.Exp(y)
		ch := (ey + 1/ey) / 2
		sh := (ey - 1/ey) / 2
		g1 := sh / c.sqb
		if s < 0 {
			g1 = -g1
		}
		return stumpffG{ch, g1, (ch - 1) / -c.beta, (g1 - s) / -c.beta}
	}
}

// maxKeplerIter bounds the root finder; the safeguarded Laguerre iteration
// normally needs 2-6 steps, bisection at most about 60 more.
const maxKeplerIter = 100

// solve returns the universal anomaly s with
//
//	F(s) = q s + mu e G3(s) - t = 0
//
// (Kepler's equation in universal variables from perihelion, where r0 = q
// and r0.v0 = 0; Danby, Fundamentals of Celestial Mechanics, 2nd ed., sec.
// 6.9), together with the G functions at s. t >= 0; guess, if > 0, is a
// starting value close to the root (a warm start from a nearby time).
//
// F is strictly increasing (F' = r >= q > 0) and convex for s >= 0 within
// half a period, so [lo, hi] always brackets the single root. Steps are
// those of the Laguerre-Conway method (Conway 1986, Celest. Mech. 39, 199,
// citation from memory; degree 5), replaced by bisection whenever a step
// leaves the bracket or fails to halve the previous step.
func (c *Conic) solve(t, guess float64) (float64, stumpffG) {
	if t == 0 {
		return 0, stumpffG{g0: 1}
	}
	if c.muE == 0 {
		// Circle: F(s) = q s - t exactly.
		s := t / c.q
		return s, c.gFuncs(s)
	}
	// F(0) = -t < 0 and F(t/q) = mu e G3 >= 0. For an ellipse, half a
	// period is s = pi/sqrt(beta), where F = P/2 - t >= 0.
	lo, hi := 0.0, t/c.q
	if c.beta > 0 {
		hi = math.Min(hi, math.Pi/c.sqb)
	}
	s := guess
	if !(s > 0) {
		s, lo, hi = c.start(t, lo, hi)
	}
	s = math.Min(math.Max(s, lo), hi)
	var g stumpffG
	prevStep := hi - lo
	for i := 0; i < maxKeplerIter; i++ {
		g = c.gFuncs(s)
		f := c.q*s + c.muE*g.g3 - t
		if math.IsNaN(f) || math.IsInf(f, 0) {
			// Overflow far above the root (sinh of a huge argument).
			hi = s
			s = lo + (hi-lo)/2
			continue
		}
		if f == 0 {
			return s, g
		}
		if f < 0 {
			lo = s
		} else {
			hi = s
		}
		f1 := c.q + c.muE*g.g2 // = r
		f2 := c.muE * g.g1
		den := f1 + math.Sqrt(math.Abs(16*f1*f1-20*f*f2))
		ds := -5 * f / den
		next := s + ds
		if math.Abs(ds) <= 1e-7*math.Abs(s) {
			// Converged: the Laguerre step (cubically convergent) leaves
			// s+ds within ~1e-20 relative of the root, and advancing the G
			// functions by the second-order Taylor step (dG_n/ds =
			// G_{n-1}, dG0/ds = -beta G1) leaves errors near (ds/s)^3.
			h := ds * ds / 2
			return next, stumpffG{
				g0: g.g0 - c.beta*(g.g1*ds+g.g0*h),
				g1: g.g1 + g.g0*ds - c.beta*g.g1*h,
				g2: g.g2 + g.g1*ds + g.g0*h,
				g3: g.g3 + g.g2*ds + g.g1*h,
			}
		}
		if !(next >= lo && next <= hi) || 2*math.Abs(ds) > math.Abs(prevStep) {
			// Laguerre left the bracket, or is crawling (far up the
			// exponential branch of a hyperbola steps shrink by only ~1
			// in H each): bisect, as in "rtsafe" (Press et al., Numerical
			// Recipes, sec. 9.4).
			next = lo + (hi-lo)/2
			if next == s {
				return s, g
			}
		}
		prevStep = next - s
		s = next
	}
	return s, g
}

// start returns a starting value for solve and a narrowed bracket.
// The parabolic (cubic) solution sc is a lower bound for an ellipse
// (c3(x) < 1/6 for x > 0) and an upper bound for a hyperbola.
func (c *Conic) start(t, lo, hi float64) (s, lo2, hi2 float64) {
	sc := c.cubicRoot(t)
	switch {
	case c.beta > 0:
		if sc > 0 && sc < hi {
			lo = sc * (1 - 1e-12)
		}
		// The cubic while the eccentric anomaly is small, else
		// E0 = M + 0.85 e (Danby & Burkardt 1983, Celest. Mech. 31, 95;
		// citation from memory).
		if sc*c.sqb < 1 {
			return sc, lo, hi
		}
		m := t * 2 * math.Pi / c.per
		return math.Min(m+0.85*c.e, math.Pi) / c.sqb, lo, hi
	case c.beta < 0:
		if sc > 0 {
			hi = math.Min(hi, sc*(1+1e-12))
		}
		// Far from perihelion the hyperbolic Kepler equation
		// e sinh H - H = M approaches e exp(H)/2 = M + H: start from
		// H0 = ln(2M/e + 1.8), the usual asymptotic guess (the constant
		// as in Danby's text, from memory), else from the cubic, exact as
		// e -> 1 or M -> 0.
		m := t * -c.beta * c.sqb / muSun
		if m > c.e {
			return math.Log(2*m/c.e+1.8) / c.sqb, lo, hi
		}
		return sc, lo, hi
	}
	return sc, lo, hi
}

// cubicRoot returns the real root of q s + mu e s^3/6 = t (Barker's
// equation in the universal anomaly; exact for a parabola), written as
// s^3 + P s - Q = 0 with P > 0 and solved by Cardano's formula in the
// cancellation-free form s = Q/(w^2 + P/3 + (P/(3w))^2),
// w^3 = Q/2 + sqrt(Q^2/4 + P^3/27).
// It returns 0 when e is too small for the form to be meaningful.
func (c *Conic) cubicRoot(t float64) float64 {
	p := 6 * c.q / c.muE
	if p > 1e100 {
		return 0
	}
	qq := 6 * t / c.muE
	w := math.Cbrt(qq/2 + math.Sqrt(qq*qq/4+p*p*p/27))
	u := p / (3 * w)
	return qq / (w*w + p/3 + u*u)
}

// state returns the heliocentric position and velocity (GCRS axes, AU and
// AU/day) at dt days after perihelion, and the universal anomaly (for warm
// starts); guess as for solve, for the signed dt.
func (c *Conic) state(dt, guess float64) (pos, vel Vec3, s float64) {
	t := dt
	if c.per > 0 && math.Abs(t) > c.per/2 {
		// Ellipse: reduce to within half a period of perihelion. The state
		// depends on G0..G2 only, which are periodic in s.
		t -= c.per * math.Round(t/c.per)
	}
	neg := t < 0
	if neg {
		t, guess = -t, -guess
	}
	s, g := c.solve(t, guess)
	if neg {
		// F(-s) = -F(s) for t -> -t: G1, G3 are odd in s, G0, G2 even.
		s, g.g1, g.g3 = -s, -g.g1, -g.g3
	}
	// f and g functions from perihelion (r0 = q, r0.v0 = 0):
	// r = q + mu e G2, position = (q - mu G2) P + q v0 G1 Q,
	// velocity = -(mu G1/r) P + (q v0 G0/r) Q.
	r := c.q + c.muE*g.g2
	x := c.q - muSun*g.g2
	y := c.q * c.v0 * g.g1
	vx := -muSun * g.g1 / r
	vy := c.q * c.v0 * g.g0 / r
	for i := 0; i < 3; i++ {
		pos[i] = x*c.pHat[i] + y*c.qvHat[i]
		vel[i] = vx*c.pHat[i] + vy*c.qvHat[i]
	}
	return pos, vel, s
}

// sincePerihelion returns tt - T in days, differencing the two-part dates
// part by part.
func (c *Conic) sincePerihelion(tt JD) float64 {
	return (tt.Hi - c.t0.Hi) + (tt.Lo - c.t0.Lo)
}

// State returns the heliocentric position (AU) and velocity (AU/day) of the
// body at tt, GCRS axes, on the unperturbed conic. One propagator serves
// every eccentricity: Kepler's equation in universal variables with
// Stumpff functions (Danby, Fundamentals of Celestial Mechanics, 2nd ed.,
// sec. 6.9), starting from the perihelion state r = q, v = sqrt(mu(1+e)/q).
// Against the classical anomalies (an independent solution, orbit_test.go)
// it agrees to about 1e-13 AU within 100 AU of the Sun over a century; the
// rounding of tt - T limits the phase to about 1e-16 rad per radian of
// mean anomaly, so the error grows with the number of revolutions.
func (c *Conic) State(tt JD) (pos, vel Vec3) {
	pos, vel, _ = c.state(c.sincePerihelion(tt), 0)
	return pos, vel
}

// View is what an observer sees of the body.
type View struct {
	// Astrometric is the vector observer -> body at the emission time
	// (light-time corrected), GCRS axes, AU; no aberration, no deflection.
	Astrometric Vec3
	// DeltaAU is the observer-body distance (light-time corrected); RAU
	// the Sun-body distance at emission.
	DeltaAU, RAU float64
	// PhaseRad is the Sun-body-observer angle, ElongRad the
	// Sun-observer-body angle (solar elongation), radians.
	PhaseRad, ElongRad float64
	// Magnitude is the predicted magnitude by the orbit's law; NaN for
	// MagNone.
	Magnitude float64
	// RateRA (in RA times cos(dec)) and RateDec are the apparent motion on
	// the sky in arcsec per minute, including the observer's own motion.
	RateRA, RateDec float64
}

// Light-time iteration: at most lightTimeIter passes of tau = Delta/c after
// the geometric first guess, stopping once tau changes by less than
// lightTimeTolDay (86 ns: under 1e-13 AU of motion even at 1 AU/day).
const (
	lightTimeIter   = 3
	lightTimeTolDay = 1e-12
)

// Observe returns the body's view from an observer at tt (TT).
// earthPos/earthVel are the Earth's heliocentric position and velocity
// (EarthHeliocentric: GCRS axes, AU, AU/day); obsPos/obsVel the observer's
// offset from the geocentre (GCRS, AU and AU/day; zero vectors for a
// geocentric view).
//
// The body's position is taken at the emission time tt - tau, tau =
// Delta/c iterated from the geometric distance (the standard light-time
// correction; e.g. Meeus, Astronomical Algorithms, 2nd ed., ch. 33). The
// rates project the relative velocity (body at emission, scaled by
// 1 - d(tau)/dt, minus observer) on the directions of increasing RA and
// Dec, so they are the time derivatives of the astrometric direction.
func (c *Conic) Observe(tt JD, earthPos, earthVel, obsPos, obsVel Vec3) View {
	obs := earthPos.Add(obsPos)
	obsV := earthVel.Add(obsVel)
	dt0 := c.sincePerihelion(tt)

	p, v, s := c.state(dt0, 0)
	d := p.Sub(obs)
	tau := d.Norm() / LightAUPerDay
	prevDt := dt0
	for i := 0; i < lightTimeIter; i++ {
		dt := dt0 - tau
		// Warm start to second order: ds/dt = 1/r, d2s/dt2 = -(r.v)/r^3.
		h, ir := dt-prevDt, 1/p.Norm()
		p, v, s = c.state(dt, s+h*ir*(1-h*p.Dot(v)*ir*ir/2))
		prevDt = dt
		d = p.Sub(obs)
		next := d.Norm() / LightAUPerDay
		conv := math.Abs(next-tau) <= lightTimeTolDay
		tau = next
		if conv {
			break
		}
	}

	var w View
	w.Astrometric = d
	w.DeltaAU = d.Norm()
	w.RAU = p.Norm()
	w.PhaseRad = Separation(p, d)
	w.ElongRad = Separation(obs.Scale(-1), d)
	w.Magnitude = c.magnitude(w.RAU, w.DeltaAU, w.PhaseRad)

	if w.DeltaAU > 0 {
		u := d.Scale(1 / w.DeltaAU)
		// d/dt [p(t - tau(t)) - o(t)] = v (1 - tau') - v_obs, with
		// tau' = u.(v - v_obs)/(c + u.v) from differentiating tau = Delta/c.
		tauDot := u.Dot(v.Sub(obsV)) / (LightAUPerDay + u.Dot(v))
		rel := v.Scale(1 - tauDot).Sub(obsV)
		cd := math.Hypot(u[0], u[1])
		var eRA, eDec Vec3
		if cd > 0 {
			eRA = Vec3{-u[1] / cd, u[0] / cd, 0}
			eDec = Vec3{-u[2] * u[0] / cd, -u[2] * u[1] / cd, cd}
		} else {
			// At a pole RA is undefined; use the directions at RA = 0.
			eRA = Vec3{0, 1, 0}
			eDec = Vec3{-math.Copysign(1, u[2]), 0, 0}
		}
		// rad/day -> arcsec/min.
		k := Rad2Arcsec / 1440 / w.DeltaAU
		w.RateRA = rel.Dot(eRA) * k
		w.RateDec = rel.Dot(eDec) * k
	}
	return w
}
