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
	h := alt * Rad2Deg
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
	r *= o.PressureHPa / 1010 * 283 / (273 + o.TempC)
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
// apparent altitude and the altitude in degrees (grids in inner loops).
func AirmassSin(sinAlt, altDeg float64) float64 {
	if altDeg <= 0 {
		return math.Inf(1)
	}
	// exp(-1.6364 ln x) is the same power, without math.Pow's special cases.
	return 1 / (sinAlt + 0.50572*math.Exp(-1.6364*math.Log(altDeg+6.07995)))
}

// HADecToHorizon rotates a vector from the local hour-angle frame (see
// Local.OfDateToHADec) to (north, east, up) about the ellipsoid normal.
func (o *Observer) HADecToHorizon(hd Vec3) Vec3 {
	return Vec3{-o.sinLat*hd[0] + o.cosLat*hd[2], hd[1], o.cosLat*hd[0] + o.sinLat*hd[2]}
}

// SinCosLat returns the sine and cosine of the geodetic latitude.
func (o *Observer) SinCosLat() (float64, float64) { return o.sinLat, o.cosLat }
