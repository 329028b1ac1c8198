package constraints

import "math"

// acosFast is arccos to 3e-8 rad (6 mas), by the polynomial of Abramowitz &
// Stegun, Handbook of Mathematical Functions, eq. 4.4.46 (|error| <= 2e-8 on
// [0, 1]; coefficients from memory, checked against math.Acos by
// TestAcosFast). Tracks store float32 radians (1e-7), so this costs nothing
// in precision and a third of the grid's time in speed.
func acosFast(x float64) float64 {
	neg := x < 0
	if neg {
		x = -x
	}
	if x > 1 {
		x = 1
	}
	p := -0.0012624911
	p = p*x + 0.0066700901
	p = p*x - 0.0170881256
	p = p*x + 0.0308918810
	p = p*x - 0.0501743046
	p = p*x + 0.0889789874
	p = p*x - 0.2145988016
	p = p*x + 1.5707963050
	r := math.Sqrt(1-x) * p
	if neg {
		return math.Pi - r
	}
	return r
}

// asinFast is pi/2 - acosFast(x).
func asinFast(x float64) float64 { return math.Pi/2 - acosFast(x) }

// atan2Fast is math.Atan2 to 4e-8 rad (8 mas) for finite arguments, by the
// odd polynomial for arctan on [0, 1] of Abramowitz & Stegun, Handbook of
// Mathematical Functions, eq. 4.4.49 (|error| <= 1e-8 there, 4e-8 as measured here; coefficients from
// memory, checked against math.Atan2 by TestAtan2Fast), reduced from the
// octants. Tracks store azimuths as float32 (2.4e-7 rad at 2 pi), so this is
// below their precision.
func atan2Fast(y, x float64) float64 {
	ax, ay := x, y
	if ax < 0 {
		ax = -ax
	}
	if ay < 0 {
		ay = -ay
	}
	if ax == 0 && ay == 0 {
		if x < 0 || x == 0 && math.Signbit(x) {
			return math.Copysign(math.Pi, y)
		}
		return y // keeps the sign of zero, as math.Atan2
	}
	swap := ay > ax
	t := ay / ax
	if swap {
		t = ax / ay
	}
	t2 := t * t
	p := -0.0040540580
	p = p*t2 + 0.0218612288
	p = p*t2 - 0.0559098861
	p = p*t2 + 0.0964200441
	p = p*t2 - 0.1390853351
	p = p*t2 + 0.1994653599
	p = p*t2 - 0.3332985605
	p = p*t2 + 0.9999993329
	r := t * p
	if swap {
		r = math.Pi/2 - r
	}
	if x < 0 {
		r = math.Pi - r
	}
	if math.Signbit(y) {
		r = -r
	}
	return r
}
