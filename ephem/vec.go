package ephem

import "math"

// Vec3 is a Cartesian 3-vector.
type Vec3 [3]float64

// Mat3 is a 3x3 matrix, row major; M.MulVec(v) computes M*v.
type Mat3 [3][3]float64

// Identity3 is the 3x3 identity matrix.
var Identity3 = Mat3{{1, 0, 0}, {0, 1, 0}, {0, 0, 1}}

// Add returns a+b.
func (a Vec3) Add(b Vec3) Vec3 { return Vec3{a[0] + b[0], a[1] + b[1], a[2] + b[2]} }

// Sub returns a-b.
func (a Vec3) Sub(b Vec3) Vec3 { return Vec3{a[0] - b[0], a[1] - b[1], a[2] - b[2]} }

// Scale returns s*a.
func (a Vec3) Scale(s float64) Vec3 { return Vec3{s * a[0], s * a[1], s * a[2]} }

// Dot returns the scalar product a.b.
func (a Vec3) Dot(b Vec3) float64 { return a[0]*b[0] + a[1]*b[1] + a[2]*b[2] }

// Cross returns the vector product a x b.
func (a Vec3) Cross(b Vec3) Vec3 {
	return Vec3{a[1]*b[2] - a[2]*b[1], a[2]*b[0] - a[0]*b[2], a[0]*b[1] - a[1]*b[0]}
}

// Norm returns |a|.
func (a Vec3) Norm() float64 { return math.Sqrt(a.Dot(a)) }

// Unit returns a/|a|; the zero vector is returned unchanged.
func (a Vec3) Unit() Vec3 {
	n := a.Norm()
	if n == 0 {
		return a
	}
	return a.Scale(1 / n)
}

// MulVec returns m*v.
func (m *Mat3) MulVec(v Vec3) Vec3 {
	return Vec3{
		m[0][0]*v[0] + m[0][1]*v[1] + m[0][2]*v[2],
		m[1][0]*v[0] + m[1][1]*v[1] + m[1][2]*v[2],
		m[2][0]*v[0] + m[2][1]*v[1] + m[2][2]*v[2],
	}
}

// TMulVec returns transpose(m)*v, the inverse rotation for a rotation matrix.
func (m *Mat3) TMulVec(v Vec3) Vec3 {
	return Vec3{
		m[0][0]*v[0] + m[1][0]*v[1] + m[2][0]*v[2],
		m[0][1]*v[0] + m[1][1]*v[1] + m[2][1]*v[2],
		m[0][2]*v[0] + m[1][2]*v[1] + m[2][2]*v[2],
	}
}

// Mul returns a*b.
func (a Mat3) Mul(b Mat3) Mat3 {
	var r Mat3
	for i := 0; i < 3; i++ {
		for j := 0; j < 3; j++ {
			r[i][j] = a[i][0]*b[0][j] + a[i][1]*b[1][j] + a[i][2]*b[2][j]
		}
	}
	return r
}

// Transpose returns the transpose of m.
func (m Mat3) Transpose() Mat3 {
	return Mat3{
		{m[0][0], m[1][0], m[2][0]},
		{m[0][1], m[1][1], m[2][1]},
		{m[0][2], m[1][2], m[2][2]},
	}
}

// RotX returns the matrix that rotates the reference frame by angle phi
// (radians) about the x axis, the SOFA convention (iauRx): a positive angle
// rotates the axes anticlockwise seen from +x, so vectors appear to turn
// clockwise.
func RotX(phi float64) Mat3 {
	s, c := math.Sincos(phi)
	return Mat3{{1, 0, 0}, {0, c, s}, {0, -s, c}}
}

// RotY is RotX about the y axis (SOFA iauRy).
func RotY(theta float64) Mat3 {
	s, c := math.Sincos(theta)
	return Mat3{{c, 0, -s}, {0, 1, 0}, {s, 0, c}}
}

// RotZ is RotX about the z axis (SOFA iauRz).
func RotZ(psi float64) Mat3 {
	s, c := math.Sincos(psi)
	return Mat3{{c, s, 0}, {-s, c, 0}, {0, 0, 1}}
}

// SphericalToVec returns the unit vector at longitude lon and latitude lat
// (radians).
func SphericalToVec(lon, lat float64) Vec3 {
	sl, cl := math.Sincos(lon)
	sb, cb := math.Sincos(lat)
	return Vec3{cb * cl, cb * sl, sb}
}

// VecToSpherical returns longitude in [0, 2pi), latitude and length of v.
func VecToSpherical(v Vec3) (lon, lat, r float64) {
	r = v.Norm()
	if r == 0 {
		return 0, 0, 0
	}
	lon = math.Atan2(v[1], v[0])
	if lon < 0 {
		lon += 2 * math.Pi
	}
	lat = math.Asin(clamp(v[2]/r, -1, 1))
	return lon, lat, r
}

// Separation returns the angle between two non-zero vectors (radians), by
// the atan2 form that stays accurate for small and near-pi angles.
func Separation(a, b Vec3) float64 {
	return math.Atan2(a.Cross(b).Norm(), a.Dot(b))
}

func clamp(x, lo, hi float64) float64 {
	if x < lo {
		return lo
	}
	if x > hi {
		return hi
	}
	return x
}

// NormAngle returns a reduced to [0, 2pi).
func NormAngle(a float64) float64 {
	a = math.Mod(a, 2*math.Pi)
	if a < 0 {
		a += 2 * math.Pi
	}
	return a
}

// Angle constants.
const (
	Deg2Rad    = math.Pi / 180
	Rad2Deg    = 180 / math.Pi
	Arcsec2Rad = math.Pi / (180 * 3600)
	Rad2Arcsec = 180 * 3600 / math.Pi
)
