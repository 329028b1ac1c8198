package constraints

import "math"

// acosFast is arccos to 3e-8 rad (6 mas), by the polynomial of Abramowitz &
// Stegun, Handbook of Mathematical Functions, eq. 4.4.46 (|error| <= 2e-8 on
// [0, 1]; coefficients from memory, checked against math.Acos by
// TestAcosFast). Tracks store float32 radians (1e-7), so this costs nothing
// in precision and a third of the grid's time in speed.
func acosFast(x float64) float64 {
	a := min(math.Abs(x), 1) // |x|, rounding past 1 clipped
	r := math.Sqrt(1-a) * (((((((-0.0012624911*a+0.0066700901)*a-0.0170881256)*a+0.0308918810)*a-
		0.0501743046)*a+0.0889789874)*a-0.2145988016)*a + 1.5707963050)
	if x < 0 {
		r = math.Pi - r
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
	lo, hi := ay, ax
	if swap {
		lo, hi = ax, ay
	}
	r := atanUnit(lo / hi)
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

// atanUnit is arctan(t) for t in [0, 1], the polynomial of atan2Fast
// (small enough to inline, so that loops can reduce the octants themselves
// without a call).
func atanUnit(t float64) float64 {
	t2 := t * t
	p := -0.0040540580
	p = p*t2 + 0.0218612288
	p = p*t2 - 0.0559098861
	p = p*t2 + 0.0964200441
	p = p*t2 - 0.1390853351
	p = p*t2 + 0.1994653599
	p = p*t2 - 0.3332985605
	p = p*t2 + 0.9999993329
	return t * p
}

// expFast is math.Exp to 6e-9 relative for y in [-700, 700] (the grid's
// arguments lie within [-20, 0]; its values are stored as float32, 6e-8):
// y = n ln 2 + r with |r| <= ln 2 / 2 (ln 2 in two parts, Cody & Waite's
// reduction), e^r by its Taylor series to r^7 (truncation under 6e-9), and
// 2^n put in the exponent bits. Checked against math.Exp by
// TestExpLogFast.
func expFast(y float64) float64 {
	if !(y > -700 && y < 700) {
		return math.Exp(y) // 0, +Inf or NaN; never on the grid
	}
	const (
		ln2Hi = 6.93147180369123816490e-01
		ln2Lo = 1.90821492927058770002e-10
		log2e = 1.44269504088896338700e+00
	)
	fn := math.Floor(y*log2e + 0.5)
	r := (y - fn*ln2Hi) - fn*ln2Lo
	p := 1.0 / 5040
	p = p*r + 1.0/720
	p = p*r + 1.0/120
	p = p*r + 1.0/24
	p = p*r + 1.0/6
	p = p*r + 0.5
	p = p*r + 1
	p = p*r + 1
	return p * math.Float64frombits(uint64(int64(fn)+1023)<<52)
}

// logFast is math.Log to 1e-9 absolute for positive normal x: x = m 2^e
// from the bits with m in [sqrt(1/2), sqrt(2)), ln m = 2 atanh(s) with
// s = (m-1)/(m+1), |s| <= 0.172, by its series to s^9 (truncation under
// 7e-10). Zero, negative, NaN, infinite and subnormal x get math.Log's
// answers. Checked against math.Log by TestExpLogFast.
func logFast(x float64) float64 {
	if !(x >= 0x1p-1022 && x <= math.MaxFloat64) {
		return math.Log(x)
	}
	bits := math.Float64bits(x)
	e := float64(int64(bits>>52) - 1023)
	m := math.Float64frombits(bits&(1<<52-1) | 1023<<52) // [1, 2)
	if m > math.Sqrt2 {
		m *= 0.5
		e++
	}
	s := (m - 1) / (m + 1)
	s2 := s * s
	p := 1.0 / 9
	p = p*s2 + 1.0/7
	p = p*s2 + 1.0/5
	p = p*s2 + 1.0/3
	p = p*s2 + 1
	return e*math.Ln2 + 2*s*p
}
