package ephem

import (
	"math"
	"testing"
	"time"
)

var (
	sinkSnap  Snapshot
	sinkFloat float64
	sinkNight Night
)

// BenchmarkPrepare is the per-instant cost: time scales, IAU 2006/2000B
// orientation, VSOP87 Earth, apparent Sun and Meeus Moon.
func BenchmarkPrepare(b *testing.B) {
	t0 := time.Date(2026, 12, 24, 20, 0, 0, 0, time.UTC)
	b.ReportAllocs()
	for i := 0; b.Loop(); i++ {
		sinkSnap = Prepare(NewInstant(t0.Add(time.Duration(i%720) * time.Minute)))
	}
}

// BenchmarkLocal is the per-(site, instant) cost on top of Prepare.
func BenchmarkLocal(b *testing.B) {
	o, _ := NewObserver(46.52, 7.41, 1410)
	s := Prepare(NewInstant(time.Date(2026, 12, 24, 20, 0, 0, 0, time.UTC)))
	b.ReportAllocs()
	for b.Loop() {
		l := s.Local(&o)
		sinkFloat += l.LAST
	}
}

// BenchmarkStarHorizontal is the per-(target, instant) cost of a fixed
// target's altitude and azimuth once the instant and site are prepared.
func BenchmarkStarHorizontal(b *testing.B) {
	o, _ := NewObserver(46.52, 7.41, 1410)
	s := Prepare(NewInstant(time.Date(2026, 12, 24, 20, 0, 0, 0, time.UTC)))
	l := s.Local(&o)
	stars := make([]Vec3, 1000)
	for i := range stars {
		st, _ := NewStar(float64(i)*0.36, -60+float64(i%120), 0, 0)
		stars[i] = st.Direction(s.TT)
	}
	b.Run("alt-az", func(b *testing.B) {
		b.ReportAllocs()
		for i := 0; b.Loop(); i++ {
			alt, az := l.StarHorizontal(stars[i%len(stars)])
			sinkFloat += alt + az
		}
	})
	// The grid's path: hour-angle frame, horizon, tabulated refraction.
	b.Run("ha-frame-horizon-refraction", func(b *testing.B) {
		b.ReportAllocs()
		for i := 0; b.Loop(); i++ {
			h := o.HADecToHorizon(l.StarHADec(stars[i%len(stars)]))
			alt := math.Asin(h[2])
			sinkFloat += o.RefractionFast(alt) + math.Atan2(h[1], h[0])
		}
	})
}

// BenchmarkNightEvents is one night's Sun and Moon events for one site.
func BenchmarkNightEvents(b *testing.B) {
	o, _ := NewObserver(46.52, 7.41, 1410)
	b.ReportAllocs()
	for i := 0; b.Loop(); i++ {
		sinkNight = NightOf(&o, 2026, 12, 1+i%28)
	}
}

// BenchmarkPlanet is the per-(target, instant) cost of a planet or the
// Moon: "helio" the truncated VSOP87B series alone, "observe" the
// topocentric view with light time, rates and magnitude (what a night grid
// pays per step), one b.Run per body.
func BenchmarkPlanet(b *testing.B) {
	o, _ := NewObserver(46.52, 7.41, 1410)
	s := Prepare(NewInstant(time.Date(2026, 12, 24, 20, 0, 0, 0, time.UTC)))
	l := s.Local(&o)
	for _, name := range BodyNames() {
		body, _ := ParseBody(name)
		m, _ := NewBody(body)
		if p, ok := m.(*Planet); ok {
			b.Run(name+"/helio", func(b *testing.B) {
				b.ReportAllocs()
				for i := 0; b.Loop(); i++ {
					pos, _ := p.Heliocentric(s.TT.AddDays(float64(i%720) / 1440))
					sinkFloat += pos[0]
				}
			})
		}
		b.Run(name+"/observe", func(b *testing.B) {
			b.ReportAllocs()
			for b.Loop() {
				u, v := l.OrbitView(m)
				sinkFloat += u[0] + v.Magnitude
			}
		})
	}
}
