package crossphantom

import "math"

// vec is a point or direction in millimetres.
type vec [3]float64

func (a vec) add(b vec) vec       { return vec{a[0] + b[0], a[1] + b[1], a[2] + b[2]} }
func (a vec) sub(b vec) vec       { return vec{a[0] - b[0], a[1] - b[1], a[2] - b[2]} }
func (a vec) scale(s float64) vec { return vec{a[0] * s, a[1] * s, a[2] * s} }
func (a vec) dot(b vec) float64   { return a[0]*b[0] + a[1]*b[1] + a[2]*b[2] }
func (a vec) norm() float64       { return math.Sqrt(a.dot(a)) }
func (a vec) unit() vec           { return a.scale(1 / a.norm()) }
func (a vec) cross(b vec) vec {
	return vec{a[1]*b[2] - a[2]*b[1], a[2]*b[0] - a[0]*b[2], a[0]*b[1] - a[1]*b[0]}
}
func (m mat) apply(a vec) vec    { return vec{m[0].dot(a), m[1].dot(a), m[2].dot(a)} }
func (m mat) col(j int) vec      { return vec{m[0][j], m[1][j], m[2][j]} }
func deg(d float64) float64      { return d * math.Pi / 180 }
func (m mat) transpose() (t mat) { return mat{m.col(0), m.col(1), m.col(2)} }
func (m mat) mul(b mat) (r mat) {
	bt := b.transpose()
	return mat{rowMul(m[0], bt), rowMul(m[1], bt), rowMul(m[2], bt)}
}
func rowMul(r vec, bt mat) vec { return vec{r.dot(bt[0]), r.dot(bt[1]), r.dot(bt[2])} }

// mat is a 3x3 matrix stored by rows.
type mat [3]vec

// rotX, rotY and rotZ rotate by a radians about the patient's
// left-right, anterior-posterior and superior-inferior axes.
func rotX(a float64) mat {
	c, s := math.Cos(a), math.Sin(a)
	return mat{{1, 0, 0}, {0, c, -s}, {0, s, c}}
}

func rotY(a float64) mat {
	c, s := math.Cos(a), math.Sin(a)
	return mat{{c, 0, s}, {0, 1, 0}, {-s, 0, c}}
}

func rotZ(a float64) mat {
	c, s := math.Cos(a), math.Sin(a)
	return mat{{c, -s, 0}, {s, c, 0}, {0, 0, 1}}
}

// Plane is the truth midsagittal plane in patient coordinates (LPS, mm,
// PS3.3 C.7.6.2.1.1): the points p with (p - Point)·Normal = 0.
type Plane struct {
	// Point is the centroid of the sampled cord centreline; it lies on
	// the plane.
	Point [3]float64 `json:"point"`
	// Normal is the unit normal, pointing to the patient's left (+x).
	Normal [3]float64 `json:"normal"`
}

// fitMidline fits the plane x = a + b·y + c·z to points by least squares
// (x is the patient's left-right coordinate, regressed on the other two),
// so the fit is well posed even when the centreline is nearly straight.
func fitMidline(pts []vec) Plane {
	var c vec
	for _, p := range pts {
		c = c.add(p)
	}
	c = c.scale(1 / float64(len(pts)))
	// Normal equations for centred data: [Syy Syz; Syz Szz][b c] = [Sxy Sxz].
	var syy, syz, szz, sxy, sxz float64
	for _, p := range pts {
		d := p.sub(c)
		syy += d[1] * d[1]
		syz += d[1] * d[2]
		szz += d[2] * d[2]
		sxy += d[0] * d[1]
		sxz += d[0] * d[2]
	}
	det := syy*szz - syz*syz
	var b, cc float64
	if math.Abs(det) > 1e-9 {
		b = (sxy*szz - sxz*syz) / det
		cc = (sxz*syy - sxy*syz) / det
	}
	n := vec{1, -b, -cc}.unit()
	return Plane{Point: c, Normal: n}
}
