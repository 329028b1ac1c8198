package ephem

import "time"

// PlanningSpan is the part of a night that planning covers: sunset to the
// next sunrise; where the Sun does not rise, to the end of the noon-to-noon
// window; where it is already down at the window's start (no sunset), from
// the start. ok is false where the Sun does not set.
func PlanningSpan(o *Observer, n *Night) (start, end time.Time, ok bool) {
	if set, has := n.Get(Sunset); has {
		start = set
	} else if SunAltitude(o, n.Start) < SunriseAltDeg*Deg2Rad {
		start = n.Start
	} else {
		return time.Time{}, time.Time{}, false
	}
	end = n.End
	if rise, has := n.Get(Sunrise); has && rise.After(start) {
		end = rise
	}
	return start, end, end.After(start)
}

// SunAltitude is the Sun's geometric altitude (centre, radians) at t.
func SunAltitude(o *Observer, t time.Time) float64 {
	snap := Prepare(NewInstant(t))
	l := snap.Local(o)
	return l.SunPlace().Alt
}

// DarkTimes returns the time in [start, end) with the Sun's centre below
// -18 deg, and the part of it with the Moon down. The intervals come from
// the crossings that AllEvents finds (astronomical dusk and dawn, moonrise
// and moonset) and the state at start; "Moon down" uses the same horizon
// as moonrise and moonset (the upper limb at the refracted horizon), a few
// minutes from its centre at 0 deg.
func DarkTimes(o *Observer, start, end time.Time) (dark, moonless time.Duration) {
	snap := Prepare(NewInstant(start))
	l := snap.Local(o)
	sunDark := l.SunPlace().Alt*Rad2Deg < AstronomicalAltDeg
	mp := l.MoonPlace()
	moonUp := mp.Alt > (-34.0/60)*Deg2Rad-MoonSemidiameter(l.MoonOfDate().Norm())
	t := start
	add := func(to time.Time) {
		if sunDark {
			dark += to.Sub(t)
			if !moonUp {
				moonless += to.Sub(t)
			}
		}
		t = to
	}
	for _, e := range AllEvents(o, start, end) {
		switch e.Kind {
		case AstronomicalDusk:
			add(e.Time)
			sunDark = true
		case AstronomicalDawn:
			add(e.Time)
			sunDark = false
		case Moonrise:
			add(e.Time)
			moonUp = true
		case Moonset:
			add(e.Time)
			moonUp = false
		}
	}
	add(end)
	return dark, moonless
}
