package catalogue

import (
	"fmt"
	"math"
	"sort"
	"time"

	"github.com/nightloom/nightloom/ephem"
)

// TonightQuery asks what is well placed from a site on one night.
type TonightQuery struct {
	// Observer is the site.
	Observer *ephem.Observer
	// Year, Month, Day is the civil date on which the night begins; the
	// night runs from local mean-solar noon to the next (ephem.NightWindow).
	Year  int
	Month time.Month
	Day   int
	// SunAltDeg is the Sun's geometric altitude below which the sky counts
	// as dark: -18 (astronomical, the default when zero), -12 or -6.
	SunAltDeg float64
	// MinAltDeg is the lowest useful geometric altitude of an object
	// (default 30 when zero).
	MinAltDeg float64
	// MagLimit drops objects fainter than this (and those without a
	// magnitude).
	MagLimit float64
	// Type and Constellation filter as in Query.
	Type, Constellation string
	// Step is the sampling step (default 10 minutes).
	Step time.Duration
	// Limit caps the number of results (0: no cap).
	Limit int
}

// Observable is one object's placement on the night.
type Observable struct {
	Entry *Entry
	// Score ranks objects: see Tonight.
	Score float64
	// Hours is the time the object spends above MinAltDeg while it is dark.
	Hours float64
	// MaxAltDeg is the highest geometric altitude in the dark, at Best.
	MaxAltDeg float64
	Best      time.Time
}

// TonightResult is the dark interval and the objects ranked.
type TonightResult struct {
	// DarkStart and DarkEnd bound the dark samples (zero when the Sun
	// never gets low enough); DarkHours counts them.
	DarkStart, DarkEnd time.Time
	DarkHours          float64
	Objects            []Observable
}

// Tonight ranks the catalogue entries brighter than MagLimit that stand
// above MinAltDeg while the Sun is below SunAltDeg, sampled every Step.
//
// The observability score is a simple measure of our own (common practice,
// no source): the fraction of the dark time the object spends above the
// altitude floor, times 1/airmass at its highest dark altitude,
//
//	score = (hours above floor in the dark / dark hours) * sin(max alt)
//
// (1/airmass = sin(alt) in the plane-parallel approximation), so 1 is an
// object at the zenith all night and 0 one never above the floor. Ties go to
// the brighter object. Altitudes are geometric (no refraction), from ephem's
// fixed-target path (aberration included, proper motion not carried).
func (c *Catalogue) Tonight(q TonightQuery) (TonightResult, error) {
	if q.Observer == nil {
		return TonightResult{}, fmt.Errorf("%w: no site", ErrQuery)
	}
	if q.SunAltDeg == 0 {
		q.SunAltDeg = ephem.AstronomicalAltDeg
	}
	if q.MinAltDeg == 0 {
		q.MinAltDeg = 30
	}
	if q.Step == 0 {
		q.Step = 10 * time.Minute
	}
	switch {
	case !(q.SunAltDeg >= -18 && q.SunAltDeg <= 0):
		return TonightResult{}, fmt.Errorf("%w: darkness (Sun altitude) must be within [-18, 0] deg", ErrQuery)
	case !(q.MinAltDeg > 0 && q.MinAltDeg < 90):
		return TonightResult{}, fmt.Errorf("%w: minimum altitude must be within (0, 90) deg", ErrQuery)
	case math.IsNaN(q.MagLimit) || math.IsInf(q.MagLimit, 0):
		return TonightResult{}, fmt.Errorf("%w: magnitude limit must be finite", ErrQuery)
	case q.Step < time.Minute || q.Step > time.Hour:
		return TonightResult{}, fmt.Errorf("%w: step must be within 1 min .. 1 h", ErrQuery)
	}
	cands, err := c.Search(Query{Type: q.Type, Constellation: q.Constellation, MagLimit: q.MagLimit, HasMagLimit: true})
	if err != nil {
		return TonightResult{}, err
	}
	dirs := make([]ephem.Vec3, len(cands))
	for i, e := range cands {
		dirs[i] = ephem.SphericalToVec(e.RADeg*ephem.Deg2Rad, e.DecDeg*ephem.Deg2Rad)
	}
	type acc struct {
		steps int
		max   float64
		best  time.Time
	}
	accs := make([]acc, len(cands))
	for i := range accs {
		accs[i].max = math.Inf(-1)
	}
	var res TonightResult
	sinMin := math.Sin(q.MinAltDeg * ephem.Deg2Rad)
	darkSteps := 0
	start, end := ephem.NightWindow(q.Observer, q.Year, q.Month, q.Day)
	for t := start; t.Before(end); t = t.Add(q.Step) {
		snap := ephem.Prepare(ephem.NewInstant(t))
		l := snap.Local(q.Observer)
		if l.SunPlace().Alt*ephem.Rad2Deg >= q.SunAltDeg {
			continue
		}
		if darkSteps == 0 {
			res.DarkStart = t
		}
		res.DarkEnd = t
		darkSteps++
		for i, u := range dirs {
			// Aberration (< 21") is far below what a 10-minute ranking needs.
			h := l.GCRSToHorizon.MulVec(u)
			if h[2] < sinMin {
				continue
			}
			accs[i].steps++
			if alt := math.Asin(h[2]); alt > accs[i].max {
				accs[i].max, accs[i].best = alt, t
			}
		}
	}
	res.DarkHours = float64(darkSteps) * q.Step.Hours()
	if darkSteps == 0 {
		return res, nil
	}
	for i, e := range cands {
		a := accs[i]
		if a.steps == 0 {
			continue
		}
		res.Objects = append(res.Objects, Observable{
			Entry:     e,
			Hours:     float64(a.steps) * q.Step.Hours(),
			MaxAltDeg: a.max * ephem.Rad2Deg,
			Best:      a.best,
			Score:     float64(a.steps) / float64(darkSteps) * math.Sin(a.max),
		})
	}
	sort.SliceStable(res.Objects, func(i, j int) bool {
		a, b := res.Objects[i], res.Objects[j]
		if a.Score != b.Score {
			return a.Score > b.Score
		}
		return a.Entry.Mag < b.Entry.Mag
	})
	if q.Limit > 0 && len(res.Objects) > q.Limit {
		res.Objects = res.Objects[:q.Limit]
	}
	return res, nil
}
