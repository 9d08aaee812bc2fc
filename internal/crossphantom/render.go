package crossphantom

import (
	"math"
	"math/rand/v2"
)

// series is the acquisition geometry and contrast of one series: slice
// planes with DICOM's row and column directions (PS3.3 C.7.6.2.1.1).
type series struct {
	rows, cols int
	spacing    float64 // pixel spacing, mm (square pixels)
	row, col   vec     // Image Orientation (Patient): row then column direction
	normal     vec     // row × col
	positions  []vec   // Image Position (Patient) of each slice, ordered along normal
	thickness  float64
	gap        float64 // Spacing Between Slices minus thickness
	contrast   contrast
	snr        float64 // cord signal over the noise sigma, before bias
	gain       float64 // stored value of signal 1.0 at bias 1
	bias       [6]float64
	biasC      vec
}

// subPlanes is how many planes across the slice thickness each pixel
// integrates: one every half millimetre or so, 5 to 9 (the brief's range).
func subPlanes(thickness float64) int {
	n := int(math.Ceil(thickness/0.5)) + 1
	return min(max(n, 5), 9)
}

// render forms slice i: the tissue signal averaged over the slice
// thickness (partial volume), times a smooth coil bias field, plus Rician
// noise (the magnitude of signal plus complex Gaussian noise), scaled to
// 12-bit stored values.
func (s *series) render(nk *neck, i int, r *rand.Rand, out []uint16) {
	n := s.rows * s.cols
	acc := make([]float64, n)
	np := subPlanes(s.thickness)
	rt := nk.rot.transpose() // patient -> neck frame
	dc := rt.apply(s.row.scale(s.spacing))
	dr := rt.apply(s.col.scale(s.spacing))
	for p := range np {
		t := s.thickness * ((float64(p)+0.5)/float64(np) - 0.5)
		base := rt.apply(s.positions[i].add(s.normal.scale(t)).sub(nk.origin))
		for y := range s.rows {
			q := base.add(dr.scale(float64(y)))
			o := y * s.cols
			for x := range s.cols {
				acc[o+x] += s.contrast[nk.tissueAt(q[0], q[1], q[2])]
				q[0] += dc[0]
				q[1] += dc[1]
				q[2] += dc[2]
			}
		}
	}
	sigma := s.contrast[tCord] / s.snr
	inv := 1 / float64(np)
	for y := range s.rows {
		for x := range s.cols {
			p := s.positions[i].add(s.row.scale(float64(x) * s.spacing)).add(s.col.scale(float64(y) * s.spacing))
			sig := acc[y*s.cols+x] * inv * s.biasAt(p)
			re := sig + sigma*r.NormFloat64()
			im := sigma * r.NormFloat64()
			v := math.Sqrt(re*re+im*im) * s.gain
			out[y*s.cols+x] = uint16(min(math.Round(v), 4095))
		}
	}
}

// biasAt is the receive coil's smooth sensitivity at p: a posterior
// (spine array) gradient, a superior-inferior fall-off and a slight
// left-right tilt, as a quadratic in patient coordinates (common
// practice for a synthetic bias field).
func (s *series) biasAt(p vec) float64 {
	d := p.sub(s.biasC).scale(0.01)
	b := 1 + s.bias[0]*d[1] + s.bias[1]*d[1]*d[1] + s.bias[2]*d[2]*d[2] + s.bias[3]*d[0] + s.bias[4]*d[2] + s.bias[5]*d[0]*d[0]
	return min(max(b, 0.35), 1.8)
}
