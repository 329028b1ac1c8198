package ephem

import (
	"errors"
	"fmt"
	"math"
)

// Refitting a comet's total-magnitude law from measured magnitudes.
//
// The law is m = M1 + 5 log10(Delta) + K1 log10(r) (MagComet). With
// y = m - 5 log10(Delta) and x = log10(r) it is the straight line
// y = M1 + K1 x, fitted by weighted least squares with weights 1/sigma^2
// (e.g. Press et al., Numerical Recipes, 3rd ed., sec. 15.2, "fitting data
// to a straight line"; the normal equations are solved in closed form).

// MagObservation is one measured total magnitude of a comet.
type MagObservation struct {
	Mag      float64 // measured total magnitude
	SigmaMag float64 // its 1-sigma uncertainty, mag (> 0)
	RAU      float64 // heliocentric distance at the time, AU
	DeltaAU  float64 // distance from the observer, AU
}

// Refit settings.
const (
	// MinRefitObservations is the fewest observations a fit accepts: one
	// magnitude cannot tell a wrong law from a bad measurement.
	MinRefitObservations = 2
	// MaxFreeK1Sigma is the decision rule for K1: K1 is fitted only when the
	// observations would determine it to this 1-sigma uncertainty or
	// better (2.5 = one unit of the activity index n, K1 = 2.5 n), which
	// needs at least three observations spread in log10(r); otherwise K1 is
	// held at the prior law's value and only M1 is fitted. With sigma = 0.2
	// mag per observation this needs a spread of log10(r) of about 0.08
	// (r changing by 20 %) over ten observations. Our rule; no published
	// source.
	MaxFreeK1Sigma = 2.5
)

// Refit errors.
var (
	ErrTooFewObservations = fmt.Errorf("ephem: a brightness fit needs at least %d observations", MinRefitObservations)
	ErrBadObservation     = errors.New("ephem: an observation needs a finite magnitude, a positive uncertainty and positive distances")
)

// MagFit is a fitted comet magnitude law with its uncertainties.
type MagFit struct {
	M1, K1 float64
	// SigmaM1 and SigmaK1 are the 1-sigma uncertainties (SigmaK1 is 0 when
	// K1 was held fixed); CovM1K1 their covariance. They are the formal
	// uncertainties from the observations' sigmas, scaled up by
	// sqrt(chi^2/dof) when that exceeds 1 (the scatter is larger than the
	// stated sigmas; common practice, no source).
	SigmaM1, SigmaK1, CovM1K1 float64
	// K1Fixed reports that K1 was held at the prior value (see
	// MaxFreeK1Sigma).
	K1Fixed bool
	// Chi2 is the weighted sum of squared residuals, Dof its degrees of
	// freedom (observations minus fitted parameters).
	Chi2 float64
	Dof  int
	// Residuals are observed minus fitted magnitudes, in input order.
	Residuals []float64
}

// FitCometMagnitude fits M1 and K1 of m = M1 + 5 log10(Delta) + K1 log10(r)
// to obs, holding K1 at priorK1 when the observations cannot determine it
// (MaxFreeK1Sigma). Errors: ErrTooFewObservations, ErrBadObservation.
func FitCometMagnitude(obs []MagObservation, priorK1 float64) (MagFit, error) {
	if len(obs) < MinRefitObservations {
		return MagFit{}, fmt.Errorf("%w (got %d)", ErrTooFewObservations, len(obs))
	}
	if math.IsNaN(priorK1) || math.IsInf(priorK1, 0) {
		return MagFit{}, fmt.Errorf("ephem: prior K1 must be finite")
	}
	xs, ys, ws := make([]float64, len(obs)), make([]float64, len(obs)), make([]float64, len(obs))
	var s, sx, sxx, sy, sxy float64
	for i, o := range obs {
		if math.IsNaN(o.Mag) || math.IsInf(o.Mag, 0) || !(o.SigmaMag > 0) || math.IsInf(o.SigmaMag, 0) ||
			!(o.RAU > 0) || !(o.DeltaAU > 0) || math.IsInf(o.RAU, 0) || math.IsInf(o.DeltaAU, 0) {
			return MagFit{}, fmt.Errorf("%w (observation %d)", ErrBadObservation, i+1)
		}
		xs[i] = math.Log10(o.RAU)
		ys[i] = o.Mag - 5*math.Log10(o.DeltaAU)
		ws[i] = 1 / (o.SigmaMag * o.SigmaMag)
		s += ws[i]
		sx += ws[i] * xs[i]
		sxx += ws[i] * xs[i] * xs[i]
		sy += ws[i] * ys[i]
		sxy += ws[i] * xs[i] * ys[i]
	}
	// Normal equations [s sx; sx sxx] [M1 K1]' = [sy sxy]'; the
	// determinant is s * (weighted variance of x) * s.
	det := s*sxx - sx*sx
	var f MagFit
	free := len(obs) >= 3 && det > 0 && math.Sqrt(s/det) <= MaxFreeK1Sigma
	if free {
		f.M1 = (sxx*sy - sx*sxy) / det
		f.K1 = (s*sxy - sx*sy) / det
		f.SigmaM1, f.SigmaK1, f.CovM1K1 = math.Sqrt(sxx/det), math.Sqrt(s/det), -sx/det
		f.Dof = len(obs) - 2
	} else {
		f.K1, f.K1Fixed = priorK1, true
		f.M1 = (sy - priorK1*sx) / s
		f.SigmaM1 = math.Sqrt(1 / s)
		f.Dof = len(obs) - 1
	}
	f.Residuals = make([]float64, len(obs))
	for i := range obs {
		r := ys[i] - (f.M1 + f.K1*xs[i])
		f.Residuals[i] = r
		f.Chi2 += ws[i] * r * r
	}
	if f.Dof > 0 {
		if k := f.Chi2 / float64(f.Dof); k > 1 {
			sk := math.Sqrt(k)
			f.SigmaM1 *= sk
			f.SigmaK1 *= sk
			f.CovM1K1 *= k
		}
	}
	return f, nil
}

// Predict returns the fitted law's magnitude at distances r and Delta (AU)
// and its 1-sigma uncertainty, sqrt(J C J') with J = (1, log10 r) and C the
// covariance of (M1, K1).
func (f MagFit) Predict(rAU, deltaAU float64) (mag, sigma float64) {
	x := math.Log10(rAU)
	mag = cometMagnitude(f.M1, f.K1, deltaAU, rAU)
	v := f.SigmaM1*f.SigmaM1 + 2*x*f.CovM1K1 + x*x*f.SigmaK1*f.SigmaK1
	return mag, math.Sqrt(math.Max(v, 0))
}
