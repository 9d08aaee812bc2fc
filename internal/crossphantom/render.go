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
// integrates: one every half millimetre or so, 5 to 9 (the brief's
// range), and an odd number so every other plane, both faces included,
// can probe first.
func subPlanes(thickness float64) int {
	n := int(math.Ceil(thickness/0.5)) + 1
	n |= 1
	return min(max(n, 5), 9)
}

// render forms slice i: the tissue signal averaged over the slice
// thickness (partial volume), times a smooth coil bias field, plus Rician
// noise (the magnitude of signal plus complex Gaussian noise), scaled to
// 12-bit stored values.
//
// Each pixel first samples the even sub-planes (both faces and every
// second plane between, at most 0.9 mm apart); only where they disagree
// are the odd planes sampled too. Where they agree the pixel is taken as
// uniform, which misses only a structure thinner than the probe step
// lying wholly between two probes.
func (s *series) render(nk *neck, i int, r *rand.Rand, out []uint16) {
	np := subPlanes(s.thickness)
	rt := nk.rot.transpose() // patient -> neck frame
	dc := rt.apply(s.row.scale(s.spacing))
	dr := rt.apply(s.col.scale(s.spacing))
	dn := rt.apply(s.normal.scale(s.thickness / float64(np)))
	first := rt.apply(s.positions[i].add(s.normal.scale(s.thickness * (0.5/float64(np) - 0.5))).sub(nk.origin))
	sigma := s.contrast[tCord] / s.snr
	inv := 1 / float64(np)
	// The bias field is a quadratic in patient coordinates; its argument
	// moves linearly along rows and columns.
	b0 := s.positions[i].sub(s.biasC).scale(0.01)
	bc := s.row.scale(s.spacing * 0.01)
	br := s.col.scale(s.spacing * 0.01)
	var probe [5]tissue
	for y := range s.rows {
		q := first.add(dr.scale(float64(y)))
		bd := b0.add(br.scale(float64(y)))
		o := y * s.cols
		for x := range s.cols {
			same := true
			for p := 0; p < np; p += 2 {
				t := float64(p)
				probe[p/2] = nk.tissueAt(q[0]+t*dn[0], q[1]+t*dn[1], q[2]+t*dn[2])
				same = same && probe[p/2] == probe[0]
			}
			var sig float64
			if same {
				sig = s.contrast[probe[0]]
			} else {
				for p := range np {
					if p%2 == 0 {
						sig += s.contrast[probe[p/2]]
						continue
					}
					t := float64(p)
					sig += s.contrast[nk.tissueAt(q[0]+t*dn[0], q[1]+t*dn[1], q[2]+t*dn[2])]
				}
				sig *= inv
			}
			sig *= s.biasAt(bd)
			g := r.Uint64()
			re := sig + sigma*gauss[g&(nGauss-1)]
			im := sigma * gauss[(g>>32)&(nGauss-1)]
			v := math.Sqrt(re*re+im*im) * s.gain
			out[o+x] = uint16(min(v+0.5, 4095))
			q[0] += dc[0]
			q[1] += dc[1]
			q[2] += dc[2]
			bd[0] += bc[0]
			bd[1] += bc[1]
			bd[2] += bc[2]
		}
	}
}

// nGauss standard normal deviates, drawn once, serve as the noise
// source: two random indices per pixel cost less than two fresh
// deviates, and 2^16 distinct values are more than 12-bit images resolve.
const nGauss = 1 << 16

var gauss = func() []float64 {
	r := rand.New(rand.NewPCG(1, 2))
	g := make([]float64, nGauss)
	for i := range g {
		g[i] = r.NormFloat64()
	}
	return g
}()

// biasAt is the receive coil's smooth sensitivity at p: a posterior
// (spine array) gradient, a superior-inferior fall-off and a slight
// left-right tilt, as a quadratic in patient coordinates (common
// practice for a synthetic bias field).
// d is the offset from the field's centre in units of 100 mm.
func (s *series) biasAt(d vec) float64 {
	b := 1 + s.bias[0]*d[1] + s.bias[1]*d[1]*d[1] + s.bias[2]*d[2]*d[2] + s.bias[3]*d[0] + s.bias[4]*d[2] + s.bias[5]*d[0]*d[0]
	return min(max(b, 0.35), 1.8)
}
