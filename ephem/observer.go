package ephem

import (
	"errors"
	"math"
)

// WGS84 ellipsoid (NIMA TR8350.2, 3rd ed., 2000).
const (
	wgs84A  = 6378.137              // equatorial radius, km
	wgs84F  = 1 / 298.257223563     // flattening
	wgs84E2 = wgs84F * (2 - wgs84F) // first eccentricity squared
)

// Physical constants.
const (
	// AUKm is the astronomical unit in km (IAU 2012 Resolution B2, exact).
	AUKm = 149597870.700
	// LightAUPerDay is the speed of light in AU/day (c = 299792.458 km/s).
	LightAUPerDay = 299792.458 * 86400 / AUKm
	// earthRotRate is the Earth's mean angular velocity, rad/s (IERS
	// Conventions 2010, table 1.1).
	earthRotRate = 7.292115e-5
)

// Sentinel errors for observer parameters.
var (
	ErrLatitude    = errors.New("ephem: latitude must be within [-90, 90] deg")
	ErrLongitude   = errors.New("ephem: longitude must be within [-180, 360] deg")
	ErrElevation   = errors.New("ephem: elevation must be within [-500, 10000] m")
	ErrPressure    = errors.New("ephem: pressure must be within [0, 1200] hPa")
	ErrTemperature = errors.New("ephem: temperature must be within [-90, 60] C")
)

// Observer is a place on the WGS84 ellipsoid with the air that refracts
// its view. Build it with NewObserver.
type Observer struct {
	LatRad, LonRad float64 // geodetic latitude, longitude east positive
	HeightM        float64 // height above the ellipsoid
	// PressureHPa and TempC feed refraction; PressureHPa = 0 means
	// geometric (unrefracted) altitudes.
	PressureHPa, TempC float64

	sinLat, cosLat float64
	itrsKm         Vec3 // geocentric position in the terrestrial frame, km
	horizon        Mat3 // hour-angle/declination frame -> (north, east, up)
}

// NewObserver returns the observer at geodetic latitude and longitude
// (degrees, east positive) and height (m), with standard air of 1010 hPa and
// 10 C. Geodetic to geocentric by the closed form for the ellipsoid (e.g.
// Explanatory Supplement 3rd ed., eq. 7.134).
func NewObserver(latDeg, lonDeg, heightM float64) (Observer, error) {
	switch {
	case !(latDeg >= -90 && latDeg <= 90):
		return Observer{}, ErrLatitude
	case !(lonDeg >= -180 && lonDeg <= 360):
		return Observer{}, ErrLongitude
	case !(heightM >= -500 && heightM <= 10000):
		return Observer{}, ErrElevation
	}
	o := Observer{LatRad: latDeg * Deg2Rad, LonRad: lonDeg * Deg2Rad, HeightM: heightM,
		PressureHPa: 1010, TempC: 10}
	o.sinLat, o.cosLat = math.Sincos(o.LatRad)
	n := wgs84A / math.Sqrt(1-wgs84E2*o.sinLat*o.sinLat)
	h := heightM / 1000
	sl, cl := math.Sincos(o.LonRad)
	o.itrsKm = Vec3{(n + h) * o.cosLat * cl, (n + h) * o.cosLat * sl, (n*(1-wgs84E2) + h) * o.sinLat}
	s, c := o.sinLat, o.cosLat
	o.horizon = Mat3{{-s, 0, c}, {0, 1, 0}, {c, 0, s}}
	return o, nil
}

// SetAir sets the pressure (hPa) and temperature (C) used for refraction.
// Pressure 0 turns refraction off.
func (o *Observer) SetAir(pressureHPa, tempC float64) error {
	if !(pressureHPa >= 0 && pressureHPa <= 1200) {
		return ErrPressure
	}
	if !(tempC >= -90 && tempC <= 60) {
		return ErrTemperature
	}
	o.PressureHPa, o.TempC = pressureHPa, tempC
	return nil
}

// GeocentricKm returns the observer's position in the terrestrial frame (km).
func (o *Observer) GeocentricKm() Vec3 { return o.itrsKm }

// Refraction returns the refraction (radians, to add to the geometric
// altitude) for a geometric altitude alt (radians), by Saemundsson (1986,
// Sky & Telescope 72, 70), R = 1.02' / tan(h + 10.3/(h + 5.11)), scaled by
// (P/1010)(283/(273+T)) as in Meeus, Astronomical Algorithms ch. 16. It is 0
// when pressure is 0. Below -1 deg the formula loses meaning; the
// correction there is tapered linearly to 0 at -5 deg so that altitudes stay
// continuous and monotonic (our choice; nothing is observable there).
func (o *Observer) Refraction(alt float64) float64 {
	if o.PressureHPa <= 0 {
		return 0
	}
	return o.airScale() * saemundsson(alt*Rad2Deg)
}

// RefractionFast is Refraction read from a table every 1/64 deg (1/512 deg
// below 5 deg) with linear interpolation, for grids: it differs from
// Refraction by under 0.05 arcsec (TestRefractionFast).
func (o *Observer) RefractionFast(alt float64) float64 {
	if o.PressureHPa <= 0 {
		return 0
	}
	h := alt * Rad2Deg
	var x float64
	switch {
	case h <= -5:
		return 0
	case h < 5:
		x = (h + 5) * refrFine
	case h < 90:
		x = 10*refrFine + (h-5)*refrCoarse
	default:
		return o.airScale() * saemundsson(h)
	}
	i := int(x)
	f := x - float64(i)
	return o.airScale() * (refrTable[i] + f*(refrTable[i+1]-refrTable[i]))
}

const (
	refrFine   = 512 // entries per degree from -5 to 5 deg
	refrCoarse = 64  // entries per degree from 5 to 90 deg
)

// refrTable holds saemundsson(h) for h from -5 deg, fine then coarse.
var refrTable = func() []float64 {
	t := make([]float64, 0, 10*refrFine+85*refrCoarse+2)
	for i := 0; i < 10*refrFine; i++ {
		t = append(t, saemundsson(-5+float64(i)/refrFine))
	}
	for i := 0; i <= 85*refrCoarse+1; i++ {
		t = append(t, saemundsson(5+float64(i)/refrCoarse))
	}
	return t
}()

// airScale is Meeus's (P/1010)(283/(273+T)) factor.
func (o *Observer) airScale() float64 { return o.PressureHPa / 1010 * 283 / (273 + o.TempC) }

// saemundsson returns the refraction (radians) at standard air for a
// geometric altitude h in degrees, with the taper below -1 deg.
func saemundsson(h float64) float64 {
	scale := 1.0
	if h < -1 {
		if h <= -5 {
			return 0
		}
		scale = (h + 5) / 4
		h = -1
	}
	if h > 90 {
		h = 90
	}
	r := 1.02 / math.Tan((h+10.3/(h+5.11))*Deg2Rad) // arcmin
	r += 0.0019279                                  // Meeus: makes R = 0 at h = 90 deg
	return scale * r / 60 * Deg2Rad
}

// Airmass returns the relative air mass for an apparent altitude (radians),
// by Kasten & Young (1989, Applied Optics 28, 4735):
// X = 1 / (sin h + 0.50572 (h + 6.07995 deg)^-1.6364), h in degrees.
// It is +Inf at and below the horizon.
func Airmass(apparentAlt float64) float64 {
	h := apparentAlt * Rad2Deg
	if h <= 0 {
		return math.Inf(1)
	}
	return AirmassSin(math.Sin(apparentAlt), h)
}

// AirmassSin is Airmass for a caller that already has the sine of the
// apparent altitude and the altitude in degrees (grids in inner loops). The
// power term of Kasten & Young is read from a table every 1/64 deg with
// linear interpolation; its relative error is below 5e-6 of the airmass,
// largest at the horizon (X = 38 +- 2e-4)
// (TestAirmassTable).
func AirmassSin(sinAlt, altDeg float64) float64 {
	if altDeg <= 0 {
		return math.Inf(1)
	}
	if altDeg >= 90 {
		return 1 / (sinAlt + kyPower(altDeg))
	}
	x := altDeg * kyPerDeg
	i := int(x)
	f := x - float64(i)
	return 1 / (sinAlt + kyTable[i] + f*(kyTable[i+1]-kyTable[i]))
}

// kyPower is Kasten & Young's 0.50572 (h + 6.07995)^-1.6364, h in degrees;
// exp(-1.6364 ln x) is the same power without math.Pow's special cases.
func kyPower(hDeg float64) float64 { return 0.50572 * math.Exp(-1.6364*math.Log(hDeg+6.07995)) }

const kyPerDeg = 64

var kyTable = func() (t [90*kyPerDeg + 2]float64) {
	for i := range t {
		t[i] = kyPower(float64(i) / kyPerDeg)
	}
	return t
}()

// HADecToHorizon rotates a vector from the local hour-angle frame (see
// Local.OfDateToHADec) to (north, east, up) about the ellipsoid normal.
func (o *Observer) HADecToHorizon(hd Vec3) Vec3 {
	return Vec3{-o.sinLat*hd[0] + o.cosLat*hd[2], hd[1], o.cosLat*hd[0] + o.sinLat*hd[2]}
}

// HorizonToHADec converts an altitude and azimuth (radians; azimuth from
// north through east) to the local hour angle (east negative, (-pi, pi])
// and declination at the observer's latitude: the standard
// spherical-triangle relations (Meeus, Astronomical Algorithms, 2nd ed.,
// ch. 13, with azimuth from north), as the inverse of HADecToHorizon.
func (o *Observer) HorizonToHADec(alt, az float64) (ha, dec float64) {
	sh, ch := math.Sincos(alt)
	sa, ca := math.Sincos(az)
	sd := o.sinLat*sh + o.cosLat*ch*ca
	dec = math.Asin(math.Max(-1, math.Min(1, sd)))
	ha = math.Atan2(-sa*ch, o.cosLat*sh-o.sinLat*ch*ca)
	return ha, dec
}
