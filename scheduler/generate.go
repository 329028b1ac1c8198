package scheduler

import (
	"fmt"
	"math"
	"math/rand/v2"
	"time"

	"github.com/nightloom/nightloom/constraints"
	"github.com/nightloom/nightloom/ephem"
)

// GenSpec describes a random instance for benchmarks and property tests.
// Every site, target and name it produces is invented.
type GenSpec struct {
	Name   string
	Seed   uint64
	Site   int    // 0: german equatorial, 38 N; 1: fork, 28 S; 2: alt-azimuth, 55 N
	Night  string // civil date of the first night, YYYY-MM-DD
	Nights int    // horizon length (0 = 1)
	Blocks int
	StepS  float64
	// QuantumS is the start resolution (0 = the default).
	QuantumS  float64
	Lookahead int
	// Load is the exposure asked for, as a multiple of the dark time of
	// the horizon.
	Load float64
	// AllOrNothing is the fraction of blocks that must be done in one run
	// (MinRun = MaxRun = FramesWanted).
	AllOrNothing float64
	// Cadence is the fraction of blocks with a cadence.
	Cadence float64
	// Comets is the number of moving targets (invented orbits, placed
	// where the site can see them in twilight).
	Comets int
	// NoFocusEvery turns the periodic focus off (focus on filter change
	// only).
	NoFocusEvery bool
	NoSky        bool
	// CloseAtH and CloseForH, when CloseForH > 0, add a closure (weather)
	// starting CloseAtH hours after the first night's nautical dusk and
	// lasting CloseForH hours (no random draw: the other values stay).
	CloseAtH, CloseForH float64
}

var genSites = []InstanceSite{
	{Name: "Ravensgate Ridge Observatory (invented)", LatDeg: 38.42, LonDeg: -106.95, ElevationM: 2410,
		PressureHPa: 760, TempC: 5, Zone: "America/Denver",
		Horizon:       [][2]float64{{0, 6}, {60, 14}, {95, 19}, {130, 11}, {200, 4}, {250, 9}, {300, 3}},
		SolarFloorDeg: 15, Mount: "german", FlipStartHADeg: 0, FlipEndHADeg: 7.5, PixelScaleArcsec: 1.1,
		ZenithSkyMag: 21.7, ExtinctionV: 0.16},
	{Name: "Cerro Piedra Tenue (invented)", LatDeg: -27.85, LonDeg: -67.92, ElevationM: 1980,
		PressureHPa: 800, TempC: 12, Zone: "America/Argentina/Catamarca",
		Horizon:       [][2]float64{{0, 3}, {90, 8}, {180, 5}, {270, 12}},
		SolarFloorDeg: 20, Mount: "fork", PixelScaleArcsec: 0.8, ZenithSkyMag: 21.8, ExtinctionV: 0.14},
	{Name: "Skerrow Fell Station (invented)", LatDeg: 55.2, LonDeg: -3.1, ElevationM: 250,
		PressureHPa: 990, TempC: 4, Zone: "Europe/London",
		SolarFloorDeg: 15, Mount: "altaz", PixelScaleArcsec: 1.6, ZenithSkyMag: 21.1, ExtinctionV: 0.22},
}

var genFilters = []string{"L", "L", "R", "G", "B", "Ha", "Ha", "OIII", "SII", "V"}

// GenerateInstance makes a deterministic random instance.
func GenerateInstance(sp GenSpec) (*Instance, error) {
	rng := rand.New(rand.NewPCG(sp.Seed, 0x73636865))
	if sp.Site < 0 || sp.Site >= len(genSites) {
		return nil, fmt.Errorf("%w: generator site %d", ErrInput, sp.Site)
	}
	nights := max(1, sp.Nights)
	in := &Instance{Name: sp.Name, Seed: sp.Seed, Site: genSites[sp.Site], Night: sp.Night, StepS: sp.StepS,
		QuantumS: sp.QuantumS, NoSky: sp.NoSky, Lookahead: sp.Lookahead}
	if nights > 1 {
		in.Nights = nights
	}
	s := &in.Site
	s.Axis1RateDegS, s.Axis2RateDegS = 3+rng.Float64()*3, 2+rng.Float64()*3
	// Each axis reaches its rate in 1.5 s (no draw, so that the other
	// values of an instance stay as they were).
	s.Axis1AccelDegS2, s.Axis2AccelDegS2 = s.Axis1RateDegS/1.5, s.Axis2RateDegS/1.5
	s.SettleS, s.AcquisitionS, s.FilterChangeS, s.ReadoutS, s.DitherS = 6, 35, 12, 5, 10
	s.FocusS, s.FocusOnFilterChange, s.FlipS = 75, true, 140
	if !sp.NoFocusEvery {
		s.FocusEveryS = 5400
	}
	site, err := in.SiteOf()
	if err != nil {
		return nil, err
	}
	day, err := in.Date()
	if err != nil {
		return nil, err
	}
	ds, de, ok := NightBounds(&site.Observer, day.Year(), day.Month(), day.Day(), constraints.DarkNautical)
	if !ok {
		return nil, fmt.Errorf("%w: no nautical night on %s at %s", ErrInput, sp.Night, s.Name)
	}
	night := de.Sub(ds).Seconds()
	mid := ds.Add(de.Sub(ds) / 2)
	snap := ephem.Prepare(ephem.NewInstant(mid))
	lstMid := snap.Local(&site.Observer).LAST * ephem.Rad2Deg
	halfNight := night / 2 / 3600 * 15 // degrees of sidereal rotation
	lat := s.LatDeg
	perBlock := sp.Load * night * float64(nights) / float64(max(1, sp.Blocks))

	for i := 0; i < sp.Blocks; i++ {
		ib := InstanceBlock{ID: fmt.Sprintf("%s-%04d", sp.Name, i+1), Target: fmt.Sprintf("NL-%d-%05d", sp.Site, rng.IntN(100000))}
		// Place targets so that most transit during the night.
		ra := lstMid + (2*rng.Float64()-1)*(halfNight+30+15*float64(nights-1)/2)
		ib.RADeg = math.Mod(math.Mod(ra, 360)+360, 360)
		dlo, dhi := math.Max(-85, lat-65), math.Min(85, lat+65)
		ib.DecDeg = math.Asin(math.Sin(dlo*ephem.Deg2Rad)+rng.Float64()*(math.Sin(dhi*ephem.Deg2Rad)-math.Sin(dlo*ephem.Deg2Rad))) * ephem.Rad2Deg
		ib.Filter = genFilters[rng.IntN(len(genFilters))]
		ib.ExposureS = []float64{60, 120, 180, 300, 300, 600}[rng.IntN(6)]
		ib.Priority = math.Round((1+9*math.Pow(rng.Float64(), 2))*10) / 10
		frame := ib.ExposureS + s.ReadoutS
		total := perBlock * (0.3 + 1.4*rng.Float64())
		ib.FramesWanted = max(2, int(total/frame))
		ib.MinRun = max(1, int((10+20*rng.Float64())*60/frame))
		ib.MaxRun = max(ib.MinRun, int((40+80*rng.Float64())*60/frame))
		if rng.Float64() < 0.6 {
			ib.DitherEvery = 1 + rng.IntN(4)
		}
		if rng.Float64() < 0.15 {
			ib.FramesDone = rng.IntN(ib.FramesWanted)
		}
		cs := InstanceSet{MaxAirmass: math.Round((1.5+rng.Float64())*100) / 100, MinAltDeg: float64(15 + rng.IntN(16)),
			MinMoonSepDeg: float64(15 + rng.IntN(35)), Darkness: "astronomical"}
		switch u := rng.Float64(); {
		case u < 0.3:
			cs.Darkness = "nautical"
		case u < 0.4:
			cs.Darkness = "civil"
		}
		if ib.Filter == "L" || ib.Filter == "V" || ib.Filter == "B" {
			if rng.Float64() < 0.5 {
				cs.MaxMoonIllum, cs.MinSkyMag = 0.7, 19.5+rng.Float64()
			}
		}
		if rng.Float64() < 0.1 {
			cs.AvoidFlipZone = true
		}
		if rng.Float64() < sp.AllOrNothing {
			ib.FramesWanted = max(2, min(ib.FramesWanted, int((25+50*rng.Float64())*60/frame)))
			ib.FramesDone = 0
			ib.MinRun, ib.MaxRun = ib.FramesWanted, ib.FramesWanted
		} else if rng.Float64() < sp.Cadence {
			ib.ExposureS = []float64{30, 60, 120}[rng.IntN(3)]
			ib.MinRun = 1 + rng.IntN(3)
			ib.MaxRun = ib.MinRun
			ib.DitherEvery = 0
			ib.CadenceEveryS = float64(30+rng.IntN(61)) * 60
			ib.CadenceTolS = float64(5+rng.IntN(11)) * 60
			ib.FramesWanted = ib.MinRun * (6 + rng.IntN(10)) * nights
			ib.FramesDone = 0
			ib.Priority = math.Max(ib.Priority, 4)
		}
		ib.Constraints = cs
		in.Blocks = append(in.Blocks, ib)
	}
	if sp.CloseForH > 0 {
		a := ds.Add(secs(sp.CloseAtH * 3600))
		in.Closures = append(in.Closures, InstanceClosure{Start: a.UTC().Format(time.RFC3339),
			End: a.Add(secs(sp.CloseForH * 3600)).UTC().Format(time.RFC3339), Note: "clouds (invented)"})
	}
	for c := 0; c < sp.Comets; c++ {
		ib, err := genComet(rng, in, site, ds, de, fmt.Sprintf("%s-C%d", sp.Name, c+1))
		if err != nil {
			return nil, err
		}
		in.Blocks = append(in.Blocks, ib)
	}
	return in, nil
}

// genComet invents a comet near perihelion that the site sees low in
// twilight on the first night: random orbits are drawn until one has a
// window of at least 20 minutes between the horizon and nautical
// twilight's end.
func genComet(rng *rand.Rand, in *Instance, site *Site, ds, de time.Time, id string) (InstanceBlock, error) {
	g, err := constraints.NewGrid(site.Site, ds.Add(-90*time.Minute), de.Add(90*time.Minute), 5*time.Minute,
		constraints.Options{NoSkyBrightness: true})
	if err != nil {
		return InstanceBlock{}, err
	}
	tt := ephem.NewInstant(ds).TT
	for try := 0; try < 2000; try++ {
		o := InstanceOrbit{QAU: 0.25 + 0.6*rng.Float64(), E: 0.995 + 0.01*rng.Float64(), IncDeg: 180 * rng.Float64(),
			NodeDeg: 360 * rng.Float64(), PeriDeg: 360 * rng.Float64(),
			PerihelionTT: tt.Value() + (2*rng.Float64()-1)*12, M1: 6 + 3*rng.Float64(), K1: 10}
		c, err := ephem.NewConic(ephem.Orbit{QAU: o.QAU, E: o.E, IncDeg: o.IncDeg, NodeDeg: o.NodeDeg, PeriDeg: o.PeriDeg,
			PerihelionTT: ephem.JD{Hi: o.PerihelionTT}, Law: ephem.MagComet, M1: o.M1, K1: o.K1})
		if err != nil {
			continue
		}
		set := &constraints.Set{MaxAirmass: 5, MinAltDeg: 6, MinSolarElongDeg: 18, Darkness: constraints.DarkCivil, FaintestMag: 13}
		tr, err := g.Track(&constraints.Target{Orbit: c})
		if err != nil {
			continue
		}
		v := g.Evaluate(tr, constraints.Request{Set: set, Exposure: 45 * time.Second, NonSidereal: true})
		longest := 0
		for _, w := range v.Windows {
			longest = max(longest, w.Len())
		}
		if longest < 4 {
			continue
		}
		return InstanceBlock{ID: id, Target: "Comet " + id + " (invented)", Orbit: &o, Filter: "L", ExposureS: 45,
			FramesWanted: 30 * max(1, in.Nights), MinRun: 8, MaxRun: 30, Priority: 9, NonSidereal: true,
			Constraints: InstanceSet{MaxAirmass: 5, MinAltDeg: 6, MinSolarElongDeg: 18, Darkness: "civil", FaintestMag: 13}}, nil
	}
	return InstanceBlock{}, fmt.Errorf("%w: no visible comet found for %s", ErrInput, id)
}
