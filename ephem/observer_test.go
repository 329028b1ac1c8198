package ephem

import (
	"math"
	"testing"
)

const arcmin = 1.0 / 60 // degrees

// Meeus, Astronomical Algorithms 2nd ed., Example 13.b: Venus from the US
// Naval Observatory (38d55'17" N, 77d03'56" W) on 1987 April 10, 19h21m UT,
// apparent alpha = 23h09m16.641s, delta = -6d43'11.61", apparent sidereal
// time at Greenwich 8h34m56.853s: hour angle 64.352133 deg, azimuth
// 68.0337 deg west of south (248.0337 deg from north), altitude 15.1249 deg.
func TestHorizontalMeeus13b(t *testing.T) {
	o, err := NewObserver(38+55.0/60+17.0/3600, -(77 + 3.0/60 + 56.0/3600), 0)
	if err != nil {
		t.Fatal(err)
	}
	s := Snapshot{GAST: (8 + 34.0/60 + 56.853/3600) * 15 * Deg2Rad}
	l := s.Local(&o)
	v := SphericalToVec((23+9.0/60+16.641/3600)*15*Deg2Rad, -(6+43.0/60+11.61/3600)*Deg2Rad)
	alt, az := l.HorizontalOfDate(v)
	ha := l.HourAngle(v)
	// Meeus prints four decimals; his H is 0.00014 deg (0.03 s of time) from
	// what his printed sidereal time gives, so allow 0.0002 deg (0.7").
	const tol = 0.0002 // deg
	if d := ha*Rad2Deg - 64.352133; math.Abs(d) > tol {
		t.Errorf("hour angle %.6f deg, want 64.352133 (tol %v)", ha*Rad2Deg, tol)
	}
	if d := az*Rad2Deg - 248.0337; math.Abs(d) > tol {
		t.Errorf("azimuth %.5f deg, want 248.0337 (tol %v)", az*Rad2Deg, tol)
	}
	if d := alt*Rad2Deg - 15.1249; math.Abs(d) > tol {
		t.Errorf("altitude %.5f deg, want 15.1249 (tol %v)", alt*Rad2Deg, tol)
	}
}

// Refraction: Meeus, Astronomical Algorithms 2nd ed., ch. 16: Saemundsson's
// formula gives 28.75' near the horizon where Bennett's gives the same to
// 0.1' (Example 16.a: apparent altitude 0.5 deg, R = 28.754', so true
// altitude 0.0208 deg); at 10 C and 1010 hPa. At h = 90 deg R = 0 (by the
// 0.0019279' correction). Pressure 0 gives no refraction.
func TestRefraction(t *testing.T) {
	o, _ := NewObserver(0, 0, 0)
	if err := o.SetAir(1010, 10); err != nil {
		t.Fatal(err)
	}
	r := o.Refraction(0.0208*Deg2Rad) * Rad2Deg
	if math.Abs(r-28.754*arcmin) > 0.15*arcmin {
		t.Errorf("refraction at true altitude 0.0208 deg = %.3f', want 28.754' +- 0.15'", r/arcmin)
	}
	if r := o.Refraction(90 * Deg2Rad); math.Abs(r) > 1e-3*arcmin*Deg2Rad {
		t.Errorf("refraction at zenith = %g rad, want 0", r)
	}
	// Standard 45-deg refraction is about 58" (Allen's Astrophysical
	// Quantities; from memory). Saemundsson's fit is tuned for low
	// altitudes and exceeds that by ~2.5" at 45 deg (Meeus ch. 16 notes
	// the formulas are for low altitudes); allow 4".
	if r := o.Refraction(45*Deg2Rad) * Rad2Deg * 3600; math.Abs(r-58.3) > 4 {
		t.Errorf("refraction at 45 deg = %.1f\", want 58.3\" +- 4\"", r)
	}
	// Monotonic and continuous through the taper below -1 deg.
	prev := math.Inf(1)
	for h := -6.0; h <= 5; h += 0.01 {
		got := o.Refraction(h * Deg2Rad)
		if h > -5 && (h+got*Rad2Deg) < (h-0.01+prev*Rad2Deg)-1e-9 && !math.IsInf(prev, 1) {
			t.Fatalf("apparent altitude decreases at %v deg", h)
		}
		prev = got
	}
	o.SetAir(0, 10)
	if r := o.Refraction(0); r != 0 {
		t.Errorf("refraction with pressure 0 = %v, want 0", r)
	}
}

// Kasten & Young (1989), Applied Optics 28, 4735: X(90 deg) = 1; at the
// horizon their model atmosphere gives 38.0868 and the fitted formula is
// within 0.5% of it (both from memory); X(30 deg) = 1.9942 (the formula and
// the secant law, which agree to 0.3% there).
func TestAirmass(t *testing.T) {
	cases := []struct{ altDeg, want, tol float64 }{
		{90, 1.0, 1e-3},
		{30, 1.9942, 2e-3},
		{0.0001, 38.0868, 0.005 * 38.0868},
	}
	for _, c := range cases {
		if got := Airmass(c.altDeg * Deg2Rad); math.Abs(got-c.want) > c.tol {
			t.Errorf("Airmass(%v deg) = %.4f, want %.4f +- %v", c.altDeg, got, c.want, c.tol)
		}
	}
	if !math.IsInf(Airmass(-0.1*Deg2Rad), 1) {
		t.Errorf("Airmass below horizon should be +Inf")
	}
}

func TestObserverValidation(t *testing.T) {
	for _, c := range []struct{ lat, lon, h float64 }{{91, 0, 0}, {0, 400, 0}, {0, 0, 20000}, {math.NaN(), 0, 0}} {
		if _, err := NewObserver(c.lat, c.lon, c.h); err == nil {
			t.Errorf("NewObserver(%v, %v, %v) accepted", c.lat, c.lon, c.h)
		}
	}
}

// WGS84 geocentric position at the equator, zero height, is the equatorial
// radius; at the pole, the polar radius b = a(1-f) = 6356.752 km (NIMA
// TR8350.2).
func TestGeocentricWGS84(t *testing.T) {
	o, _ := NewObserver(0, 0, 0)
	if d := o.GeocentricKm()[0] - 6378.137; math.Abs(d) > 1e-6 {
		t.Errorf("equator radius off by %v km", d)
	}
	p, _ := NewObserver(90, 0, 0)
	if d := p.GeocentricKm()[2] - 6356.752314; math.Abs(d) > 1e-5 {
		t.Errorf("polar radius off by %v km", d)
	}
}

// The tabulated power term reproduces Kasten & Young's formula.
func TestAirmassTable(t *testing.T) {
	worst := 0.0
	for h := 0.001; h < 90; h += 0.0137 {
		exact := 1 / (math.Sin(h*Deg2Rad) + kyPower(h))
		got := AirmassSin(math.Sin(h*Deg2Rad), h)
		worst = math.Max(worst, math.Abs(got-exact)/exact)
	}
	if worst > 5e-6 {
		t.Errorf("tabulated airmass relative error %.3g, want < 5e-6", worst)
	}
}

// The refraction table reproduces the formula.
func TestRefractionFast(t *testing.T) {
	o, _ := NewObserver(0, 0, 0)
	worst := 0.0
	for h := -6.0; h < 91; h += 0.00731 {
		worst = math.Max(worst, math.Abs(o.RefractionFast(h*Deg2Rad)-o.Refraction(h*Deg2Rad)))
	}
	if worst*Rad2Arcsec > 0.05 {
		t.Errorf("table refraction differs by %.3f arcsec, want < 0.05", worst*Rad2Arcsec)
	}
}

// HorizonToHADec against cases that follow from the definitions: the
// zenith is at hour angle 0 and declination = latitude; the north point of
// the horizon at declination 90 - latitude, hour angle 180; the east point
// at declination 0, hour angle -90 deg (6 h east); and it inverts
// HADecToHorizon.
func TestHorizonToHADec(t *testing.T) {
	const tol = 1e-9 // deg, exact arithmetic
	cases := []struct{ lat, alt, az, ha, dec float64 }{
		{41.6, 90, 0, 0, 41.6},
		{41.6, 0, 0, 180, 90 - 41.6},
		{41.6, 0, 90, -90, 0},
		{-30, 0, 270, 90, 0},
	}
	for _, c := range cases {
		o, err := NewObserver(c.lat, 0, 0)
		if err != nil {
			t.Fatal(err)
		}
		ha, dec := o.HorizonToHADec(c.alt*Deg2Rad, c.az*Deg2Rad)
		ha, dec = ha*Rad2Deg, dec*Rad2Deg
		if math.Abs(math.Remainder(ha-c.ha, 360)) > tol && c.alt != 90 || math.Abs(dec-c.dec) > tol {
			t.Errorf("lat %v alt %v az %v: ha %v dec %v, want %v %v", c.lat, c.alt, c.az, ha, dec, c.ha, c.dec)
		}
		sh, ch := math.Sincos(ha * Deg2Rad)
		sd, cd := math.Sincos(dec * Deg2Rad)
		h := o.HADecToHorizon(Vec3{cd * ch, -cd * sh, sd})
		if alt := math.Asin(h[2]) * Rad2Deg; math.Abs(alt-c.alt) > 1e-7 {
			t.Errorf("round trip altitude %v, want %v", alt, c.alt)
		}
	}
}
