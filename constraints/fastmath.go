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
