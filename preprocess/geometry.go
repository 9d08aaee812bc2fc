package preprocess

import (
	"math"

	"github.com/midsag/midsag"
)

// vec3 is a direction or position in the patient coordinate system (LPS,
// PS3.3 C.7.6.2.1.1): +x towards the patient's left, +y posterior, +z head.
type vec3 [3]float64

func (a vec3) dot(b vec3) float64 { return a[0]*b[0] + a[1]*b[1] + a[2]*b[2] }
func (a vec3) cross(b vec3) vec3 {
	return vec3{a[1]*b[2] - a[2]*b[1], a[2]*b[0] - a[0]*b[2], a[0]*b[1] - a[1]*b[0]}
}
func (a vec3) norm() float64 { return math.Sqrt(a.dot(a)) }
func (a vec3) unit() vec3 {
	n := a.norm()
	if n == 0 {
		return a
	}
	return vec3{a[0] / n, a[1] / n, a[2] / n}
}

// rowDir and colDir are the first and second direction cosines of Image
// Orientation (Patient): the direction of increasing column index along a
// row, and of increasing row index down a column (PS3.3 C.7.6.2.1.1).
func rowDir(in *midsag.Instance) vec3 {
	o := in.ImageOrientation
	return vec3{o[0], o[1], o[2]}.unit()
}

func colDir(in *midsag.Instance) vec3 {
	o := in.ImageOrientation
	return vec3{o[3], o[4], o[5]}.unit()
}

// Normal returns the slice normal, row direction x column direction.
func Normal(in *midsag.Instance) [3]float64 {
	return rowDir(in).cross(colDir(in)).unit()
}

// PositionAlong returns the distance in mm of the image's first pixel
// centre along normal: the dot product of Image Position (Patient) with the
// slice normal, which orders parallel slices (PS3.3 C.7.6.2.1.1).
func PositionAlong(in *midsag.Instance, normal [3]float64) float64 {
	return vec3(in.ImagePosition).dot(vec3(normal))
}

// angleToAxisDeg returns the angle in degrees between the line of n and the
// given patient axis (0 = x, 1 = y, 2 = z), ignoring n's sign.
func angleToAxisDeg(n [3]float64, axis int) float64 {
	c := math.Abs(n[axis]) / vec3(n).norm()
	if c > 1 {
		c = 1
	}
	return math.Acos(c) * 180 / math.Pi
}
