package constraints

import (
	"encoding/binary"
	"math"
	"testing"
	"time"
)

// FuzzHorizon: any byte string read as (az, alt) pairs either fails
// validation with ErrHorizon or gives a profile whose interpolated altitude
// is finite and within the range of its points, everywhere.
func FuzzHorizon(f *testing.F) {
	f.Add(pairs(0, 3, 90, 10, 180, 20))
	f.Add(pairs(359.999, 1, 0, 2))
	f.Add(pairs(10, -5, 10.0000001, 89.999))
	f.Add([]byte{1, 2, 3})
	f.Fuzz(func(t *testing.T, data []byte) {
		var pts []HorizonPoint
		for len(data) >= 16 && len(pts) < MaxHorizonPoints+2 {
			az := math.Float64frombits(binary.LittleEndian.Uint64(data))
			alt := math.Float64frombits(binary.LittleEndian.Uint64(data[8:]))
			pts = append(pts, HorizonPoint{az, alt})
			data = data[16:]
		}
		h, err := NewHorizon(pts)
		if err != nil {
			return
		}
		lo, hi := 0.0, 0.0
		for i, p := range h.Points() {
			if i == 0 || p.AltDeg < lo {
				lo = p.AltDeg
			}
			if i == 0 || p.AltDeg > hi {
				hi = p.AltDeg
			}
		}
		for az := -10.0; az < 370; az += 0.7 {
			a := h.AltitudeAt(az*math.Pi/180) * 180 / math.Pi
			if math.IsNaN(a) || a < lo-1e-9 || a > hi+1e-9 {
				t.Fatalf("AltitudeAt(%v) = %v outside [%v, %v] for %v", az, a, lo, hi, pts)
			}
		}
	})
}

func pairs(v ...float64) []byte {
	b := make([]byte, 8*len(v))
	for i, x := range v {
		binary.LittleEndian.PutUint64(b[8*i:], math.Float64bits(x))
	}
	return b
}

// FuzzConstraintSet: a set either fails validation with ErrSet or evaluates
// on a real grid without panics, with quality in (0, 1] exactly where the
// reason is OK.
func FuzzConstraintSet(f *testing.F) {
	f.Add(2.0, 20.0, 80.0, 30.0, 0.5, 40.0, uint8(2), 19.0, int64(20*3600), int64(6*3600), 60.0)
	f.Add(0.0, -5.0, 0.0, 0.0, 0.0, 0.0, uint8(0), 0.0, int64(0), int64(0), 0.0)
	f.Add(math.NaN(), 1e308, -1e308, 0.0, 2.0, 0.0, uint8(9), 0.0, int64(-1), int64(1<<62), 0.0)
	site := inventedSite(f)
	start := time.Date(2027, 1, 14, 17, 0, 0, 0, time.UTC)
	g, err := NewGrid(site, start, start.Add(14*time.Hour), 10*time.Minute, Options{})
	if err != nil {
		f.Fatal(err)
	}
	tracks := []*Track{}
	for _, tg := range []Target{{Orbit: inventedComet(f)}} {
		tr, err := g.Track(&tg)
		if err != nil {
			f.Fatal(err)
		}
		tracks = append(tracks, tr)
	}
	f.Fuzz(func(t *testing.T, maxX, minAlt, maxAlt, moonSep, illum, elong float64, dark uint8, sky float64,
		ls, le int64, maxHA float64) {
		c := Set{MaxAirmass: maxX, MinAltDeg: minAlt, MaxAltDeg: maxAlt, MinMoonSepDeg: moonSep, MaxMoonIllum: illum,
			MinSolarElongDeg: elong, Darkness: Dark(dark), MinSkyMag: sky, LocalStart: time.Duration(ls) * time.Second,
			LocalEnd: time.Duration(le) * time.Second, MaxHourAngleDeg: maxHA}
		if err := c.Validate(); err != nil {
			return
		}
		for _, tr := range tracks {
			v := g.Evaluate(tr, Request{Set: &c, Exposure: time.Minute})
			for i := range v.Reason {
				q := v.Quality[i]
				if (v.Reason[i] == OK) != (q > 0 && q <= 1) {
					t.Fatalf("step %d reason %v quality %v", i, v.Reason[i], q)
				}
			}
		}
	})
}
