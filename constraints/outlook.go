package constraints

import (
	"errors"
	"fmt"
	"math"
	"time"

	"github.com/nightloom/nightloom/ephem"
)

// The apparition outlook: one target over many nights, night by night, under
// one constraint set. Each night is the interval from local noon to the next
// local noon in the site's zone; it is sampled on its own grid (NewGrid) and
// evaluated as a block would be (Evaluate), so the outlook and the planner
// agree on every step.

// Outlook limits.
const (
	DefaultOutlookNights = 60
	MaxOutlookNights     = 366
	// DefaultOutlookStep is the grid step of an outlook: coarse enough for
	// 366 nights, fine enough for windows of a few minutes.
	DefaultOutlookStep = 5 * time.Minute
)

// ErrOutlook reports a bad outlook request.
var ErrOutlook = errors.New("constraints: invalid outlook request")

// OutlookNight is one night of an outlook.
type OutlookNight struct {
	// Date is the local civil date of the evening (midnight, UTC location).
	Date time.Time
	// Windows are the observable intervals of the night, in time order.
	Windows []TimeWindow
	// Reason is OK when there is a window, else why the target fails at
	// its best moment (the highest point in the required darkness), or
	// ReasonDaylight when the night never gets dark enough.
	Reason Reason
	// Best is the step of highest apparent altitude within the required
	// darkness; HasBest is false when the night never reaches it.
	HasBest bool
	Best    OutlookMoment
	// DuskAltDeg and DawnAltDeg are the target's apparent altitude when the
	// required darkness begins (evening) and ends (morning); NaN when the
	// night has no such moment.
	DuskAltDeg, DawnAltDeg float64
	// DarkFrom and DarkTo bound the required darkness (zero when none).
	DarkFrom, DarkTo time.Time
}

// TimeWindow is an observable interval [Start, End).
type TimeWindow struct{ Start, End time.Time }

// OutlookMoment describes the target at one instant.
type OutlookMoment struct {
	Time             time.Time
	AltDeg, AzDeg    float64 // apparent altitude, azimuth
	Airmass          float64 // +Inf below the horizon
	SolarElongDeg    float64
	Magnitude        float64 // predicted, with extinction; NaN without a law or below the horizon
	SkyMagArcsec2    float64 // V sky brightness at the target; NaN below the horizon
	MoonAltDeg       float64
	MoonIllumination float64 // topocentric illuminated fraction
	MoonSepDeg       float64
}

// Outlook is a target's apparition outlook.
type Outlook struct {
	Nights []OutlookNight
	// First and Last index the first and last night with a window; -1
	// when there is none.
	First, Last int
}

// ApparitionOutlook evaluates target t at site under req for nights
// consecutive nights starting with the local date first (its year, month
// and day are used), sampled every step (0 means DefaultOutlookStep).
func ApparitionOutlook(site *Site, t *Target, first time.Time, nights int, req Request, step time.Duration) (*Outlook, error) {
	if nights < 1 || nights > MaxOutlookNights {
		return nil, fmt.Errorf("%w: nights %d outside [1, %d]", ErrOutlook, nights, MaxOutlookNights)
	}
	if step == 0 {
		step = DefaultOutlookStep
	}
	if step < MinStep || step > time.Hour {
		return nil, fmt.Errorf("%w: step %v outside [%v, 1h]", ErrOutlook, step, MinStep)
	}
	loc := site.Location
	if loc == nil {
		loc = time.UTC
	}
	set := req.Set
	if set == nil {
		set = &Set{}
	}
	out := &Outlook{First: -1, Last: -1}
	y, m, d := first.Date()
	for n := 0; n < nights; n++ {
		day := time.Date(y, m, d+n, 0, 0, 0, 0, time.UTC)
		start := time.Date(y, m, d+n, 12, 0, 0, 0, loc)
		end := time.Date(y, m, d+n+1, 12, 0, 0, 0, loc)
		g, err := NewGrid(site, start, end, step, Options{})
		if err != nil {
			return nil, err
		}
		tr, err := g.Track(t)
		if err != nil {
			return nil, err
		}
		v := g.Evaluate(tr, req)
		night := outlookNight(g, tr, v, set.Darkness)
		night.Date = day
		if len(night.Windows) > 0 {
			if out.First < 0 {
				out.First = n
			}
			out.Last = n
		}
		out.Nights = append(out.Nights, night)
	}
	return out, nil
}

// outlookNight summarises one evaluated grid.
func outlookNight(g *Grid, tr *Track, v *Visibility, dark Dark) OutlookNight {
	night := OutlookNight{Reason: OK, DuskAltDeg: math.NaN(), DawnAltDeg: math.NaN()}
	for _, w := range v.Windows {
		night.Windows = append(night.Windows, TimeWindow{g.Time(w.Start), g.Time(w.End)})
	}
	best, firstDark, lastDark := -1, -1, -1
	for i := 0; i < g.N; i++ {
		if !dark.Allows(g.Dark[i]) {
			continue
		}
		if firstDark < 0 {
			firstDark = i
		}
		lastDark = i
		if best < 0 || tr.Alt[i] > tr.Alt[best] {
			best = i
		}
	}
	if best < 0 {
		if len(night.Windows) == 0 {
			night.Reason = ReasonDaylight
		}
		return night
	}
	if len(night.Windows) == 0 {
		night.Reason = v.Reason[best]
	}
	night.HasBest = true
	night.Best = g.moment(tr, best)
	night.DarkFrom, night.DarkTo = g.Time(firstDark), g.Time(lastDark+1)
	night.DuskAltDeg = float64(tr.Alt[firstDark]) * ephem.Rad2Deg
	night.DawnAltDeg = float64(tr.Alt[lastDark]) * ephem.Rad2Deg
	return night
}

// moment describes the target at step i of its track.
func (g *Grid) moment(tr *Track, i int) OutlookMoment {
	mo := OutlookMoment{Time: g.Time(i), AltDeg: float64(tr.Alt[i]) * ephem.Rad2Deg, AzDeg: float64(tr.Az[i]) * ephem.Rad2Deg,
		Airmass: float64(tr.Airmass[i]), SolarElongDeg: float64(tr.SunSep[i]) * ephem.Rad2Deg, Magnitude: math.NaN(),
		SkyMagArcsec2: float64(tr.Sky[i]), MoonAltDeg: g.MoonAlt[i] * ephem.Rad2Deg, MoonIllumination: g.MoonIllum[i],
		MoonSepDeg: float64(tr.MoonSep[i]) * ephem.Rad2Deg}
	if tr.Mag != nil {
		mo.Magnitude = float64(tr.Mag[i])
	}
	if mo.AltDeg < 0 {
		// Below the horizon: no extinction, no sky model; say nothing.
		mo.Magnitude, mo.SkyMagArcsec2 = math.NaN(), math.NaN()
	}
	return mo
}
