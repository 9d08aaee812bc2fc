package phantom

import "math"

// vec is a point or direction in patient coordinates (LPS, mm; PS3.3
// C.7.6.2.1.1) or in the neck's local frame.
type vec [3]float64

func (a vec) add(b vec) vec       { return vec{a[0] + b[0], a[1] + b[1], a[2] + b[2]} }
func (a vec) sub(b vec) vec       { return vec{a[0] - b[0], a[1] - b[1], a[2] - b[2]} }
func (a vec) scale(s float64) vec { return vec{a[0] * s, a[1] * s, a[2] * s} }
func (a vec) dot(b vec) float64   { return a[0]*b[0] + a[1]*b[1] + a[2]*b[2] }
func (a vec) cross(b vec) vec {
	return vec{a[1]*b[2] - a[2]*b[1], a[2]*b[0] - a[0]*b[2], a[0]*b[1] - a[1]*b[0]}
}
func (a vec) norm() vec { return a.scale(1 / math.Sqrt(a.dot(a))) }

// mat is a 3×3 rotation, row-major.
type mat [3][3]float64

func (m mat) apply(v vec) vec {
	return vec{m[0][0]*v[0] + m[0][1]*v[1] + m[0][2]*v[2],
		m[1][0]*v[0] + m[1][1]*v[1] + m[1][2]*v[2],
		m[2][0]*v[0] + m[2][1]*v[1] + m[2][2]*v[2]}
}

// applyT applies the transpose, the inverse of a rotation.
func (m mat) applyT(v vec) vec {
	return vec{m[0][0]*v[0] + m[1][0]*v[1] + m[2][0]*v[2],
		m[0][1]*v[0] + m[1][1]*v[1] + m[2][1]*v[2],
		m[0][2]*v[0] + m[1][2]*v[1] + m[2][2]*v[2]}
}

func (m mat) mul(n mat) mat {
	var r mat
	for i := 0; i < 3; i++ {
		for j := 0; j < 3; j++ {
			r[i][j] = m[i][0]*n[0][j] + m[i][1]*n[1][j] + m[i][2]*n[2][j]
		}
	}
	return r
}

func deg(d float64) float64 { return d * math.Pi / 180 }

// rotZ turns about the patient's superior axis (yaw); rotY about the
// posterior axis (roll, tilting the midsagittal plane towards a shoulder).
func rotZ(a float64) mat {
	c, s := math.Cos(a), math.Sin(a)
	return mat{{c, -s, 0}, {s, c, 0}, {0, 0, 1}}
}

func rotY(a float64) mat {
	c, s := math.Cos(a), math.Sin(a)
	return mat{{c, 0, s}, {0, 1, 0}, {-s, 0, c}}
}

// angleDeg is the angle between two lines (direction sign ignored).
func angleDeg(a, b vec) float64 {
	c := math.Abs(a.norm().dot(b.norm()))
	return math.Acos(math.Min(1, c)) * 180 / math.Pi
}

// round rounds to the given decimals, so the geometry written as DS text
// (PS3.5 6.2, at most 16 characters) is the geometry that was sampled.
func round(v float64, decimals int) float64 {
	p := math.Pow(10, float64(decimals))
	return math.Round(v*p) / p
}
