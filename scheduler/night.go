package scheduler

import (
	"fmt"
	"time"

	"github.com/nightloom/nightloom/constraints"
	"github.com/nightloom/nightloom/ephem"
)

// NightBounds returns the part of the night that begins on the given civil
// date (ephem.NightWindow) in which the Sun is below the level that the
// darkness requirement d names: sunset to sunrise for DarkSunset, civil
// dusk to civil dawn for DarkCivil, and so on. ok is false when the Sun
// does not cross that level in the window (polar day or night).
func NightBounds(o *ephem.Observer, year int, month time.Month, day int, d constraints.Dark) (start, end time.Time, ok bool) {
	n := ephem.NightOf(o, year, month, day)
	dusk, dawn := ephem.Sunset, ephem.Sunrise
	switch d {
	case constraints.DarkCivil:
		dusk, dawn = ephem.CivilDusk, ephem.CivilDawn
	case constraints.DarkNautical:
		dusk, dawn = ephem.NauticalDusk, ephem.NauticalDawn
	case constraints.DarkAstronomical:
		dusk, dawn = ephem.AstronomicalDusk, ephem.AstronomicalDawn
	}
	s, ok1 := n.Get(dusk)
	e, ok2 := n.Get(dawn)
	if !ok1 || !ok2 || !e.After(s) {
		return time.Time{}, time.Time{}, false
	}
	return s, e, true
}

// NightGrid builds the grid of the night beginning on the civil date,
// from the dusk to the dawn of darkness level d (see NightBounds), at the
// given step.
func NightGrid(site *constraints.Site, year int, month time.Month, day int, d constraints.Dark, step time.Duration, opts constraints.Options) (*constraints.Grid, error) {
	s, e, ok := NightBounds(&site.Observer, year, month, day, d)
	if !ok {
		return nil, fmt.Errorf("%w: no night on %04d-%02d-%02d at this site", ErrInput, year, month, day)
	}
	return constraints.NewGrid(site, s, e, step, opts)
}

// WeakestDarkness is the least darkness any of the blocks asks for (the
// night's grid must start then).
func WeakestDarkness(blocks []Block) constraints.Dark {
	w := constraints.DarkAstronomical
	for i := range blocks {
		d := constraints.DarkSunset
		if blocks[i].Set != nil {
			d = blocks[i].Set.Darkness
		}
		w = min(w, d)
	}
	return w
}
