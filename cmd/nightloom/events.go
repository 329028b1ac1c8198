package main

// One presentation of a night's Sun and Moon events for `night` (offline)
// and `events` (daemon): events in time order, the local time first and
// UTC second, names in words ("civil dusk"), events that do not happen
// listed after the others, and a line on the Moon: its phase and
// illuminated fraction.

import (
	"fmt"
	"io"
	"sort"
	"time"

	"github.com/nightloom/nightloom/ephem"
	pb "github.com/nightloom/nightloom/proto/nightloom/v1"
)

// nightEvent is one event of a night; ok is false when it does not happen.
type nightEvent struct {
	name string
	t    time.Time
	ok   bool
}

// eventWords are the events' names in words, in the order of a night
// without surprises (used for the events that do not happen).
var eventWords = map[ephem.EventKind]string{
	ephem.Sunset: "sunset", ephem.CivilDusk: "civil dusk", ephem.NauticalDusk: "nautical dusk",
	ephem.AstronomicalDusk: "astronomical dusk", ephem.AstronomicalDawn: "astronomical dawn",
	ephem.NauticalDawn: "nautical dawn", ephem.CivilDawn: "civil dawn", ephem.Sunrise: "sunrise",
	ephem.Moonrise: "moonrise", ephem.Moonset: "moonset",
}

// moonPhase names the Moon's phase from its illuminated fraction and
// whether it grows (Meeus ch. 48 gives the fraction; the quarter limits at
// 3 %, 47 %, 53 % and 97 % are common practice, no source).
func moonPhase(fraction float64, waxing bool) string {
	switch {
	case fraction < 0.03:
		return "new Moon"
	case fraction > 0.97:
		return "full Moon"
	case fraction >= 0.47 && fraction <= 0.53 && waxing:
		return "first quarter"
	case fraction >= 0.47 && fraction <= 0.53:
		return "last quarter"
	case fraction < 0.5 && waxing:
		return "waxing crescent"
	case fraction < 0.5:
		return "waning crescent"
	case waxing:
		return "waxing gibbous"
	}
	return "waning gibbous"
}

// moonAt returns the Moon's geocentric illuminated fraction at t and
// whether it is growing (compared with six hours later).
func moonAt(t time.Time) (fraction float64, waxing bool) {
	s0, s1 := ephem.Prepare(ephem.NewInstant(t)), ephem.Prepare(ephem.NewInstant(t.Add(6*time.Hour)))
	f0, _ := s0.MoonIllumination()
	f1, _ := s1.MoonIllumination()
	return f0, f1 > f0
}

// printEvents writes the events table and the Moon line. moonT is the
// instant the Moon line describes (local midnight of the night).
func printEvents(w io.Writer, loc *time.Location, events []nightEvent, moonT time.Time) error {
	happen := make([]nightEvent, 0, len(events))
	var missing []nightEvent
	for _, e := range events {
		if e.ok {
			happen = append(happen, e)
		} else {
			missing = append(missing, e)
		}
	}
	sort.SliceStable(happen, func(i, j int) bool { return happen[i].t.Before(happen[j].t) })
	tw := newTable(w)
	fmt.Fprintf(tw, "event\tlocal (%s)\tUTC\n", loc)
	for _, e := range happen {
		t := e.t.Round(time.Second)
		fmt.Fprintf(tw, "%s\t%s\t%s\n", e.name, t.In(loc).Format("2006-01-02 15:04:05"), t.UTC().Format("2006-01-02 15:04:05"))
	}
	for _, e := range missing {
		fmt.Fprintf(tw, "%s\tdoes not happen this night\t-\n", e.name)
	}
	if err := tw.Flush(); err != nil {
		return err
	}
	f, waxing := moonAt(moonT)
	_, err := fmt.Fprintf(w, "Moon at local midnight: %s, %.0f %% illuminated (geocentric)\n", moonPhase(f, waxing), 100*f)
	return err
}

// localMidnight is the midnight that ends the civil date d in loc.
func localMidnight(year int, month time.Month, day int, loc *time.Location) time.Time {
	return time.Date(year, month, day+1, 0, 0, 0, 0, loc)
}

// Bright-Moon note thresholds: a run closer than brightMoonSepDeg to a Moon
// that is up and more than brightMoonFraction lit, for a block with no Moon
// limit, gets a note (common practice, no source).
const (
	brightMoonSepDeg   = 45.0
	brightMoonFraction = 0.5
)

// brightMoonNote says when a run is planned close to a bright Moon that the
// block did not guard against (no min_moon_separation_deg and no
// max_moon_illumination): the plan is legal, but the operator may want a
// limit. "" otherwise. The Moon's altitude and illumination are computed
// here with ephem at the run's start (topocentric, geometric altitude).
func brightMoonNote(site *pb.Site, b *pb.Block, a *pb.Assignment) string {
	if b == nil || site == nil {
		return ""
	}
	if c := b.GetConstraints(); c != nil && (c.MinMoonSeparationDeg != nil || c.MaxMoonIllumination != nil) {
		return ""
	}
	sep := min(a.GetConditionsAtStart().GetMoonSeparationDeg(), a.GetConditionsAtEnd().GetMoonSeparationDeg())
	if sep >= brightMoonSepDeg {
		return ""
	}
	o, err := ephem.NewObserver(site.GetLatitudeDeg(), site.GetLongitudeDeg(), site.GetElevationM())
	if err != nil {
		return ""
	}
	snap := ephem.Prepare(ephem.NewInstant(a.GetStart().AsTime()))
	l := snap.Local(&o)
	f, _ := l.MoonIllumination()
	if f <= brightMoonFraction || l.MoonPlace().Alt <= 0 {
		return ""
	}
	return fmt.Sprintf("bright Moon %.0f deg away (%.0f %% lit), block has no Moon limit", sep, 100*f)
}
