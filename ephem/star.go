package ephem

import (
	"errors"
	"math"
)

// ErrStarPlace reports a fixed-target place outside its range.
var ErrStarPlace = errors.New("ephem: fixed target needs RA in [0, 360) deg, Dec in [-90, 90] deg and finite proper motion")

// masPerYearToRadPerDay converts milliarcseconds per Julian year.
const masPerYearToRadPerDay = Arcsec2Rad / 1000 / 365.25

// Star is a fixed target: an ICRS place at epoch J2000.0 with optional
// proper motion (PMRA is mu_alpha* = mu_alpha cos(dec)), in mas/yr.
type Star struct {
	u0, eRA, eDec Vec3 // unit direction and its tangent-plane basis at J2000
	pmRA, pmDec   float64
}

// NewStar returns the fixed target at raDeg, decDeg (ICRS, epoch J2000.0)
// with proper motion pmRAmasYr (mu_alpha*) and pmDecmasYr.
func NewStar(raDeg, decDeg, pmRAmasYr, pmDecmasYr float64) (Star, error) {
	if !(raDeg >= 0 && raDeg < 360) || !(decDeg >= -90 && decDeg <= 90) ||
		math.IsNaN(pmRAmasYr) || math.IsInf(pmRAmasYr, 0) || math.IsNaN(pmDecmasYr) || math.IsInf(pmDecmasYr, 0) {
		return Star{}, ErrStarPlace
	}
	a, d := raDeg*Deg2Rad, decDeg*Deg2Rad
	sa, ca := math.Sincos(a)
	sd, cd := math.Sincos(d)
	return Star{
		u0:    Vec3{cd * ca, cd * sa, sd},
		eRA:   Vec3{-sa, ca, 0},
		eDec:  Vec3{-sd * ca, -sd * sa, cd},
		pmRA:  pmRAmasYr * masPerYearToRadPerDay,
		pmDec: pmDecmasYr * masPerYearToRadPerDay,
	}, nil
}

// Direction returns the star's GCRS unit direction at TT (linear motion in
// the tangent plane; radial velocity and parallax neglected, which is good
// to well under an arcsecond for a century for all but the nearest stars).
func (s Star) Direction(tt JD) Vec3 {
	if s.pmRA == 0 && s.pmDec == 0 {
		return s.u0
	}
	dt := tt.DaysSinceJ2000()
	return s.u0.Add(s.eRA.Scale(s.pmRA * dt)).Add(s.eDec.Scale(s.pmDec * dt)).Unit()
}
