package phantom

import (
	"math"
	"math/rand/v2"
)

// contrast is a pulse sequence family; it picks the intensity table.
type contrast int

const (
	contrastT2 contrast = iota
	contrastT1
	contrastSTIR
	contrastGRE
)

// intensity is the relative signal of each tissue per contrast, CSF on T2
// = 1. Orderings follow textbook weighting, "from memory": T2 CSF very
// bright, cord intermediate, fat bright-ish on fast spin echo, muscle dark
// grey; T1 CSF dark, fat bright, marrow bright-ish; STIR fat dark, CSF
// bright; cortical bone, ligaments, air and flowing blood dark on all spin
// echo contrasts, while gradient echo shows inflowing blood bright.
var intensity = [...][nTissues]float32{
	//            air fat   muscle soft  marrow cortex disc  dry   annul herni csf   cord  vessel joint brain
	contrastT2:   {0, 0.72, 0.22, 0.38, 0.40, 0.04, 0.70, 0.30, 0.12, 0.28, 1.00, 0.42, 0.04, 0.65, 0.50},
	contrastT1:   {0, 1.00, 0.38, 0.42, 0.70, 0.04, 0.40, 0.36, 0.20, 0.40, 0.14, 0.52, 0.04, 0.30, 0.55},
	contrastSTIR: {0, 0.05, 0.22, 0.40, 0.15, 0.03, 0.70, 0.30, 0.10, 0.30, 1.00, 0.40, 0.04, 0.80, 0.55},
	contrastGRE:  {0, 0.80, 0.35, 0.40, 0.50, 0.05, 0.55, 0.40, 0.20, 0.35, 0.60, 0.50, 0.90, 0.50, 0.50},
}

// pose places the neck in patient coordinates: local = rot^T (p - origin).
type pose struct {
	origin vec // cord centre at the C4-C5 disc, patient coordinates
	rot    mat // yaw about z times roll about y
}

// frame is the geometry of one image (PS3.3 C.7.6.2.1.1): the centre of
// the first pixel, the row and column direction cosines, and the sizes.
type frame struct {
	ipp, row, col  vec
	rows, cols     int
	spacing, thick float64
}

func (f frame) normal() vec { return f.row.cross(f.col).norm() }

// look is how a series turns tissue into stored values.
type look struct {
	table   *[nTissues]float32
	gain    float64 // stored value of relative intensity 1
	sigma   float64 // noise standard deviation per channel, stored units
	maxVal  float64 // 2^BitsStored - 1
	biasPer float64 // receive-coil sensitivity change per mm posterior
}

// subsamples spread three samples through the slice thickness (partial
// volume) and across a quarter pixel in-plane (anti-aliasing) at the cost
// of three evaluations per pixel: {row px, column px, thickness fraction}.
var subsamples = [3][3]float64{{-0.25, 0.25, -1.0 / 3}, {0.25, 0, 0}, {0, -0.25, 1.0 / 3}}

// render samples the neck on one frame and returns stored values with
// Rician noise: the magnitude of the signal plus complex Gaussian noise,
// as a magnitude MR image has (common practice).
func render(n *neck, p pose, f frame, lk look, r *rand.Rand) []uint16 {
	out := make([]uint16, f.rows*f.cols)
	l0 := p.rot.applyT(f.ipp.sub(p.origin))
	lr := p.rot.applyT(f.row).scale(f.spacing)
	lc := p.rot.applyT(f.col).scale(f.spacing)
	ln := p.rot.applyT(f.normal()).scale(f.thick)
	var starts [3]vec
	for s, o := range subsamples {
		starts[s] = l0.add(lc.scale(o[0])).add(lr.scale(o[1])).add(ln.scale(o[2]))
	}
	tab := lk.table
	for i := 0; i < f.rows; i++ {
		down := lc.scale(float64(i))
		p0, p1, p2 := starts[0].add(down), starts[1].add(down), starts[2].add(down)
		line := out[i*f.cols : (i+1)*f.cols]
		for j := range line {
			sum := tab[n.at(p0[0], p0[1], p0[2])] + tab[n.at(p1[0], p1[1], p1[2])] + tab[n.at(p2[0], p2[1], p2[2])]
			bias := math.Max(0.5, 1+lk.biasPer*p1[1])
			v := float64(sum) / 3 * lk.gain * bias
			a := v + lk.sigma*r.NormFloat64()
			b := lk.sigma * r.NormFloat64()
			m := math.Sqrt(a*a+b*b) + 0.5
			if m > lk.maxVal {
				m = lk.maxVal
			}
			line[j] = uint16(m)
			p0, p1, p2 = p0.add(lr), p1.add(lr), p2.add(lr)
		}
	}
	return out
}
