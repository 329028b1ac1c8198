package scheduler

import (
	"bytes"
	"encoding/json"
	"fmt"
	"io"
	"time"

	"github.com/nightloom/nightloom/constraints"
	"github.com/nightloom/nightloom/ephem"
)

// Instance is a self-contained planning problem in a JSON form: a site,
// a night (or a horizon of nights), blocks and closures. Benchmark
// instances under testdata/scheduler use it.
type Instance struct {
	Name      string            `json:"name"`
	Seed      uint64            `json:"seed"`
	Site      InstanceSite      `json:"site"`
	Night     string            `json:"night"`            // civil date of the (first) night, YYYY-MM-DD
	Nights    int               `json:"nights,omitempty"` // horizon length (0 = 1)
	StepS     float64           `json:"step_s"`
	QuantumS  float64           `json:"quantum_s"`
	NoSky     bool              `json:"no_sky_brightness,omitempty"`
	Lookahead int               `json:"lookahead_nights,omitempty"` // 0 = no urgency
	Blocks    []InstanceBlock   `json:"blocks"`
	Closures  []InstanceClosure `json:"closures,omitempty"`
}

// InstanceSite is a Site in JSON form.
type InstanceSite struct {
	Name             string       `json:"name"`
	LatDeg           float64      `json:"lat_deg"`
	LonDeg           float64      `json:"lon_deg"`
	ElevationM       float64      `json:"elevation_m"`
	PressureHPa      float64      `json:"pressure_hpa"`
	TempC            float64      `json:"temp_c"`
	Zone             string       `json:"zone"`
	Horizon          [][2]float64 `json:"horizon,omitempty"` // (az_deg, alt_deg)
	SolarFloorDeg    float64      `json:"solar_floor_deg"`
	Mount            string       `json:"mount"` // german, fork, altaz
	FlipStartHADeg   float64      `json:"flip_start_ha_deg"`
	FlipEndHADeg     float64      `json:"flip_end_ha_deg"`
	PixelScaleArcsec float64      `json:"pixel_scale_arcsec"`
	ZenithSkyMag     float64      `json:"zenith_sky_mag"`
	ExtinctionV      float64      `json:"extinction_v"`

	Axis1RateDegS       float64 `json:"axis1_rate_deg_s"`
	Axis2RateDegS       float64 `json:"axis2_rate_deg_s"`
	Axis1AccelDegS2     float64 `json:"axis1_accel_deg_s2,omitempty"`
	Axis2AccelDegS2     float64 `json:"axis2_accel_deg_s2,omitempty"`
	SettleS             float64 `json:"settle_s"`
	AcquisitionS        float64 `json:"acquisition_s"`
	FilterChangeS       float64 `json:"filter_change_s"`
	ReadoutS            float64 `json:"readout_s"`
	DitherS             float64 `json:"dither_s"`
	FocusS              float64 `json:"focus_s"`
	FocusEveryS         float64 `json:"focus_every_s"`
	FocusOnFilterChange bool    `json:"focus_on_filter_change"`
	FlipS               float64 `json:"flip_s"`
}

// InstanceBlock is a Block in JSON form; the target is fixed (ra/dec) or
// an orbit.
type InstanceBlock struct {
	ID            string         `json:"id"`
	Target        string         `json:"target"`
	RADeg         float64        `json:"ra_deg,omitempty"`
	DecDeg        float64        `json:"dec_deg,omitempty"`
	Orbit         *InstanceOrbit `json:"orbit,omitempty"`
	Filter        string         `json:"filter"`
	ExposureS     float64        `json:"exposure_s"`
	FramesWanted  int            `json:"frames_wanted"`
	FramesDone    int            `json:"frames_done,omitempty"`
	MinRun        int            `json:"min_run"`
	MaxRun        int            `json:"max_run,omitempty"`
	DitherEvery   int            `json:"dither_every,omitempty"`
	Priority      float64        `json:"priority"`
	NonSidereal   bool           `json:"non_sidereal,omitempty"`
	CadenceEveryS float64        `json:"cadence_every_s,omitempty"`
	CadenceTolS   float64        `json:"cadence_tolerance_s,omitempty"`
	Constraints   InstanceSet    `json:"constraints"`
}

// InstanceOrbit holds conic elements (J2000 ecliptic) and a comet
// magnitude law.
type InstanceOrbit struct {
	QAU          float64 `json:"q_au"`
	E            float64 `json:"e"`
	IncDeg       float64 `json:"inc_deg"`
	NodeDeg      float64 `json:"node_deg"`
	PeriDeg      float64 `json:"peri_deg"`
	PerihelionTT float64 `json:"perihelion_tt_jd"`
	M1           float64 `json:"m1"`
	K1           float64 `json:"k1"`
}

// InstanceSet is a constraint set in JSON form.
type InstanceSet struct {
	MaxAirmass       float64 `json:"max_airmass,omitempty"`
	MinAltDeg        float64 `json:"min_alt_deg,omitempty"`
	MinMoonSepDeg    float64 `json:"min_moon_sep_deg,omitempty"`
	MaxMoonIllum     float64 `json:"max_moon_illumination,omitempty"`
	MinSolarElongDeg float64 `json:"min_solar_elongation_deg,omitempty"`
	Darkness         string  `json:"darkness"` // sunset, civil, nautical, astronomical
	MinSkyMag        float64 `json:"min_sky_mag,omitempty"`
	FaintestMag      float64 `json:"faintest_mag,omitempty"`
	AvoidFlipZone    bool    `json:"avoid_flip_zone,omitempty"`
	Earliest         string  `json:"earliest,omitempty"`
	Latest           string  `json:"latest,omitempty"`
}

// InstanceClosure is a Closure in JSON form (RFC 3339 instants).
type InstanceClosure struct {
	Start string `json:"start"`
	End   string `json:"end"`
	Note  string `json:"note,omitempty"`
}

// ReadInstance decodes one instance.
func ReadInstance(r io.Reader) (*Instance, error) {
	var in Instance
	dec := json.NewDecoder(r)
	dec.DisallowUnknownFields()
	if err := dec.Decode(&in); err != nil {
		return nil, fmt.Errorf("%w: instance: %w", ErrInput, err)
	}
	return &in, nil
}

// WriteInstance encodes one instance with one block per line.
func WriteInstance(w io.Writer, in *Instance) error {
	type header Instance
	h := header(*in)
	h.Blocks = nil
	hb, err := json.Marshal(h)
	if err != nil {
		return err
	}
	const null = `"blocks":null`
	i := bytes.Index(hb, []byte(null))
	if i < 0 {
		return fmt.Errorf("%w: instance header without blocks", ErrInput)
	}
	var buf bytes.Buffer
	buf.Write(hb[:i])
	buf.WriteString("\"blocks\":[\n")
	for k := range in.Blocks {
		bb, err := json.Marshal(&in.Blocks[k])
		if err != nil {
			return err
		}
		buf.Write(bb)
		if k+1 < len(in.Blocks) {
			buf.WriteByte(',')
		}
		buf.WriteByte('\n')
	}
	buf.WriteString("]")
	buf.Write(hb[i+len(null):])
	buf.WriteByte('\n')
	_, err = w.Write(buf.Bytes())
	return err
}

var darknessByName = map[string]constraints.Dark{"sunset": constraints.DarkSunset, "civil": constraints.DarkCivil,
	"nautical": constraints.DarkNautical, "astronomical": constraints.DarkAstronomical}

var mountByName = map[string]constraints.MountKind{"german": constraints.GermanEquatorial,
	"fork": constraints.ForkEquatorial, "altaz": constraints.AltAzimuth}

func secs(x float64) time.Duration { return time.Duration(x * float64(time.Second)) }

// SiteOf builds the Site.
func (in *Instance) SiteOf() (*Site, error) {
	s := &in.Site
	o, err := ephem.NewObserver(s.LatDeg, s.LonDeg, s.ElevationM)
	if err != nil {
		return nil, err
	}
	if err := o.SetAir(s.PressureHPa, s.TempC); err != nil {
		return nil, err
	}
	cs := constraints.NewSite(o)
	if s.Zone != "" {
		loc, err := time.LoadLocation(s.Zone)
		if err != nil {
			return nil, fmt.Errorf("%w: zone %q: %w", ErrInput, s.Zone, err)
		}
		cs.Location = loc
	}
	var pts []constraints.HorizonPoint
	for _, h := range s.Horizon {
		pts = append(pts, constraints.HorizonPoint{AzDeg: h[0], AltDeg: h[1]})
	}
	if cs.Horizon, err = constraints.NewHorizon(pts); err != nil {
		return nil, err
	}
	cs.SolarFloorDeg = s.SolarFloorDeg
	m, ok := mountByName[s.Mount]
	if !ok {
		return nil, fmt.Errorf("%w: mount %q", ErrInput, s.Mount)
	}
	cs.Mount = m
	cs.FlipStartHADeg, cs.FlipEndHADeg = s.FlipStartHADeg, s.FlipEndHADeg
	cs.PixelScaleArcsec = s.PixelScaleArcsec
	cs.Sky.ZenithMag, cs.Sky.ExtinctionV = s.ZenithSkyMag, s.ExtinctionV
	if err := cs.Validate(); err != nil {
		return nil, err
	}
	site := &Site{Site: cs, Overheads: Overheads{Axis1RateDegS: s.Axis1RateDegS, Axis2RateDegS: s.Axis2RateDegS,
		Axis1AccelDegS2: s.Axis1AccelDegS2, Axis2AccelDegS2: s.Axis2AccelDegS2,
		Settle: secs(s.SettleS), Acquisition: secs(s.AcquisitionS), FilterChange: secs(s.FilterChangeS),
		Readout: secs(s.ReadoutS), Dither: secs(s.DitherS), Focus: secs(s.FocusS), FocusEvery: secs(s.FocusEveryS),
		FocusOnFilterChange: s.FocusOnFilterChange, Flip: secs(s.FlipS)}}
	return site, site.Overheads.Validate()
}

// BlocksOf builds the blocks (each with its own target).
func (in *Instance) BlocksOf() ([]Block, error) {
	out := make([]Block, len(in.Blocks))
	for i := range in.Blocks {
		ib := &in.Blocks[i]
		t := &constraints.Target{Name: ib.Target}
		if ib.Orbit != nil {
			ob := ib.Orbit
			c, err := ephem.NewConic(ephem.Orbit{QAU: ob.QAU, E: ob.E, IncDeg: ob.IncDeg, NodeDeg: ob.NodeDeg,
				PeriDeg: ob.PeriDeg, PerihelionTT: ephem.JD{Hi: ob.PerihelionTT}, Law: ephem.MagComet, M1: ob.M1, K1: ob.K1})
			if err != nil {
				return nil, fmt.Errorf("%w: block %q: %w", ErrInput, ib.ID, err)
			}
			t.Orbit = c
		} else {
			st, err := ephem.NewStar(ib.RADeg, ib.DecDeg, 0, 0)
			if err != nil {
				return nil, fmt.Errorf("%w: block %q: %w", ErrInput, ib.ID, err)
			}
			t.Star = &st
		}
		cs := ib.Constraints
		dk, ok := darknessByName[cs.Darkness]
		if !ok {
			return nil, fmt.Errorf("%w: block %q: darkness %q", ErrInput, ib.ID, cs.Darkness)
		}
		set := &constraints.Set{MaxAirmass: cs.MaxAirmass, MinAltDeg: cs.MinAltDeg, MinMoonSepDeg: cs.MinMoonSepDeg,
			MaxMoonIllum: cs.MaxMoonIllum, MinSolarElongDeg: cs.MinSolarElongDeg, Darkness: dk,
			MinSkyMag: cs.MinSkyMag, FaintestMag: cs.FaintestMag, AvoidFlipZone: cs.AvoidFlipZone}
		for _, f := range []struct {
			s   string
			dst *time.Time
		}{{cs.Earliest, &set.Earliest}, {cs.Latest, &set.Latest}} {
			if f.s != "" {
				d, err := time.Parse(time.DateOnly, f.s)
				if err != nil {
					return nil, fmt.Errorf("%w: block %q: date %q", ErrInput, ib.ID, f.s)
				}
				*f.dst = d
			}
		}
		b := Block{ID: ib.ID, Target: t, Filter: ib.Filter, Exposure: secs(ib.ExposureS),
			FramesWanted: ib.FramesWanted, FramesDone: ib.FramesDone, MinRun: ib.MinRun, MaxRun: ib.MaxRun,
			DitherEvery: ib.DitherEvery, Priority: ib.Priority, Set: set, NonSidereal: ib.NonSidereal}
		if ib.CadenceEveryS > 0 {
			b.Cadence = &Cadence{Every: secs(ib.CadenceEveryS), Tolerance: secs(ib.CadenceTolS)}
		}
		if err := b.Validate(); err != nil {
			return nil, err
		}
		out[i] = b
	}
	return out, nil
}

// ClosuresOf parses the closures.
func (in *Instance) ClosuresOf() ([]Closure, error) {
	var out []Closure
	for _, c := range in.Closures {
		s, err1 := time.Parse(time.RFC3339, c.Start)
		e, err2 := time.Parse(time.RFC3339, c.End)
		if err1 != nil || err2 != nil {
			return nil, fmt.Errorf("%w: closure %q..%q", ErrInput, c.Start, c.End)
		}
		out = append(out, Closure{Start: s, End: e, Note: c.Note})
	}
	return out, nil
}

// Date returns the civil date of the first night.
func (in *Instance) Date() (time.Time, error) {
	d, err := time.Parse(time.DateOnly, in.Night)
	if err != nil {
		return time.Time{}, fmt.Errorf("%w: night %q", ErrInput, in.Night)
	}
	return d, nil
}

// Problem prepares the instance's first night with the given options
// (Quantum is the instance's): the grid from the weakest darkness any
// block asks for, the closures, and, when the instance asks for a
// lookahead, the urgency chances.
func (in *Instance) Problem(opts Options) (*Problem, error) {
	site, err := in.SiteOf()
	if err != nil {
		return nil, err
	}
	blocks, err := in.BlocksOf()
	if err != nil {
		return nil, err
	}
	closures, err := in.ClosuresOf()
	if err != nil {
		return nil, err
	}
	day, err := in.Date()
	if err != nil {
		return nil, err
	}
	g, err := NightGrid(site.Site, day.Year(), day.Month(), day.Day(), WeakestDarkness(blocks), secs(in.StepS),
		constraints.Options{NoSkyBrightness: in.NoSky})
	if err != nil {
		return nil, err
	}
	if in.QuantumS > 0 {
		opts.Quantum = secs(in.QuantumS)
	}
	var chances []int
	if in.Lookahead > 0 {
		la, err := NewLookahead(site, blocks, day, in.Lookahead, LookaheadStep, opts.Workers, opts.Cancel)
		if err != nil {
			return nil, err
		}
		chances = la.Chances(0, in.Lookahead, nil)
	}
	return NewProblem(Input{Site: site, Grid: g, Blocks: blocks, Closures: closures, Chances: chances, Options: opts})
}
