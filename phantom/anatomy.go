package phantom

import (
	"math"
	"math/rand/v2"
)

// tissue is the material at one point of the analytic neck.
type tissue uint8

const (
	tAir tissue = iota
	tFat
	tMuscle
	tSoft      // prevertebral soft tissue, glands, epidural veins
	tMarrow    // cancellous bone
	tCortex    // cortical bone and ligaments: dark on every sequence
	tDisc      // hydrated nucleus pulposus
	tDiscDry   // desiccated (degenerated) nucleus
	tAnnulus   // annulus fibrosus
	tHerniated // extruded disc material
	tCSF
	tCord
	tVessel // flowing blood: flow void
	tJoint  // facet joint cartilage and fluid
	tBrain
	nTissues
)

// discNames names the disc below vertebra k+1 (C2 is vertebra 0); disc k
// lies at local z = (2-k)*period.
var discNames = []string{"C2-C3", "C3-C4", "C4-C5", "C5-C6", "C6-C7", "C7-T1", "T1-T2", "T2-T3", "T3-T4"}

// neck is an analytic cervical spine in its own local frame: x to the
// patient's left, y posterior, z superior, in mm, with the origin at the
// centre of the cord at the level of the C4-C5 disc and the midsagittal
// plane at x = 0. Sizes are "from memory" (adult cervical anatomy) and
// randomised per study.
type neck struct {
	period, discH float64 // vertebral period and disc height along z
	lord          float64 // lordosis: canal y shift = lord*z*z (mid-neck anterior)

	canalA, canalB float64 // canal half-axes AP and LR
	cordA, cordB   float64 // cord half-axes AP and LR
	cordY          float64 // cord centre y within the canal
	bodyAP, bodyW  float64 // body AP depth and LR half-width
	spinW          float64 // spinous process LR half-width (midline only)
	spinLen        [10]float64

	neckY, neckA, neckB float64 // neck outline ellipse: centre y, half AP, half LR
	fatPost, fatAnt     float64 // subcutaneous fat thickness
	airY, airA, airB    float64 // airway ellipse
	vertX, vertY        float64 // vertebral arteries at (±vertX, vertY)

	bulge    [9]float64 // posterior protrusion of disc k beyond the body wall, mm
	bulgeW   float64    // LR half-extent of a protrusion
	osteo    bool       // protrusion is a disc-osteophyte complex (else soft disc)
	dryDisc  [9]bool
	skullZ   float64
	c2TopZ   float64
	densTopZ float64
}

// newNeck draws one neck. compressLevel is the disc index with cord
// compression, or -1 for none.
func newNeck(r *rand.Rand, compressLevel int) *neck {
	u := func(a, b float64) float64 { return a + (b-a)*r.Float64() }
	n := &neck{
		period:  u(17.5, 20), // C3-C7 body ~14-15 mm plus disc ~4-6 mm, from memory
		discH:   u(4.5, 6),
		canalA:  u(6.5, 7.5), // canal AP ~13-15 mm, from memory
		canalB:  u(10.5, 12), // canal LR ~22 mm, from memory
		cordA:   u(3.2, 3.8), // cord AP ~7 mm, from memory
		cordB:   u(5.0, 6.0), // cord LR ~11 mm, from memory
		cordY:   u(-0.6, 0.2),
		bodyAP:  u(15, 17.5), // body AP ~16 mm, from memory
		bodyW:   u(8, 10),
		spinW:   u(2.5, 3.5),
		neckY:   u(2, 10),
		neckA:   u(58, 70),
		neckB:   u(50, 62),
		fatPost: u(6, 14),
		fatAnt:  u(3, 6),
		airA:    u(6, 8),
		airB:    u(10, 14),
		vertX:   u(14.5, 16.5),
		bulgeW:  u(6.5, 9), // protrusion LR extent about ±8 mm
		osteo:   r.IntN(2) == 0,
	}
	n.lord = u(3, 7) / (70 * 70) // 3-7 mm at ±70 mm, from memory
	n.airY = -n.canalA - 1 - n.bodyAP - u(3, 6) - n.airA
	n.vertY = -n.canalA - u(2, 4)
	for v := range n.spinLen {
		n.spinLen[v] = u(14, 22) // C2 and C7 are longer, from memory
	}
	n.spinLen[0] += 6
	n.spinLen[5] += 12
	n.c2TopZ = 2*n.period + n.discH/2 + u(19, 23)
	n.densTopZ = n.c2TopZ + u(12, 16)
	n.skullZ = n.densTopZ + u(10, 16)
	// CSF between the cord front and the canal front in the midline.
	gap := n.canalA + n.cordY - n.cordA
	for k := range n.bulge {
		// Mild bulges leave at least 1.2 mm of CSF ahead of the cord, so
		// label 0 is not simply "no bulge".
		if r.Float64() < 0.5 {
			n.bulge[k] = u(0.3, 1+gap-1.2)
		}
		n.dryDisc[k] = r.Float64() < 0.3
	}
	if compressLevel >= 0 {
		// Reaches the cord and indents it by 1.2-3.5 mm.
		n.bulge[compressLevel] = 1 + gap + u(1.2, 3.5)
		n.dryDisc[compressLevel] = true
	}
	return n
}

// at returns the tissue at local point (x, y, z).
func (n *neck) at(x, y, z float64) tissue {
	if t, ok := n.skin(x, y); ok {
		return t
	}
	ax := math.Abs(x)
	ys := y - n.lord*z*z
	wall := -n.canalA - 1 // posterior wall of the vertebral bodies

	t := (2*n.period - z) / n.period
	k := int(math.Floor(t + 0.5))
	dz := z - (2-float64(k))*n.period
	front := n.protrusionFront(x, ax, dz, k, wall)
	if ys > wall && ys < front {
		if n.osteo {
			return tCortex
		}
		return tHerniated
	}
	if cx, cy := x/n.canalB, ys/n.canalA; cx*cx+cy*cy < 1 {
		return n.canal(x, ax, ys, cx, front)
	}
	if z > n.skullZ {
		return n.skull(ax, ys)
	}
	// Vertebral arteries in the transverse foramina, lateral only.
	if dx, dy := ax-n.vertX, ys-n.vertY; dx*dx+dy*dy < 2.5*2.5 && z < n.c2TopZ {
		return tVessel
	}
	v := int(math.Floor(t)) + 1 // vertebra containing z (0 = C2)
	if t < 0 {
		v = 0
	}
	// Vertebral bodies and discs.
	if ys < wall && ys > wall-n.bodyAP {
		yb := (ys - wall + n.bodyAP/2) / (n.bodyAP / 2)
		xb := x / n.bodyW
		if q := xb*xb*xb*xb + yb*yb*yb*yb; q < 1 {
			if tt := n.bodyTissue(q, ax, v, k, dz, z); tt != tAir {
				return tt
			}
		}
	} else if ys >= wall && ys < wall+1 && ax < 8 {
		return tCortex // posterior longitudinal ligament
	}
	// Posterior elements of vertebra v.
	if tt := n.posterior(ax, ys, z, v); tt != tAir {
		return tt
	}
	if ys < wall {
		return n.anteriorNeck(x, ax, ys)
	}
	return n.backMuscles(ax, ys)
}

// skin returns air outside the neck's ellipse and fat in its
// subcutaneous rim; ok is false inside.
func (n *neck) skin(x, y float64) (tissue, bool) {
	ey := (y - n.neckY) / n.neckA
	ex := x / n.neckB
	r2 := ex*ex + ey*ey
	if r2 >= 1 {
		return tAir, true
	}
	fat := n.fatAnt
	if y > n.neckY {
		fat = n.fatPost
	}
	if inner := 1 - fat/n.neckA; r2 > inner*inner {
		return tFat, true
	}
	return 0, false
}

// protrusionFront is the canal's front at this (x, z): the posterior
// wall of the bodies, pushed back by the nearest disc's bulge.
func (n *neck) protrusionFront(x, ax, dz float64, k int, wall float64) float64 {
	if k < 0 || k >= len(n.bulge) || ax >= n.bulgeW {
		return wall
	}
	hz := n.discH/2 + 1.5
	if b := n.bulge[k]; b > 0 && math.Abs(dz) < hz {
		gx := 1 - (x*x)/(n.bulgeW*n.bulgeW)
		gz := 1 - (dz*dz)/(hz*hz)
		return wall + b*gx*gz
	}
	return wall
}

// canal returns the cord or CSF inside the canal's ellipse (cx is the
// point's normalised transverse coordinate).
func (n *neck) canal(x, ax, ys, cx, front float64) tissue {
	if ax >= n.cordB {
		return tCSF
	}
	h := n.cordA * math.Sqrt(1-(x*x)/(n.cordB*n.cordB))
	lo, hi := n.cordY-h, n.cordY+h
	if front > lo {
		// The protrusion flattens the cord and pushes it back.
		push := front - lo
		lo = front + 0.2
		hi = math.Min(hi+0.35*push, n.canalA*math.Sqrt(1-cx*cx)-0.3)
	}
	if ys > lo && ys < hi {
		return tCord
	}
	return tCSF
}

// anteriorNeck classifies the neck in front of the bodies: airway,
// carotid and jugular, prevertebral tissue.
func (n *neck) anteriorNeck(x, ax, ys float64) tissue {
	ax2 := x / n.airB
	ay2 := (ys - n.airY) / n.airA
	if ax2*ax2+ay2*ay2 < 1 {
		return tAir
	}
	if dx, dy := ax-20, ys-(n.airY+2); dx*dx+dy*dy < 3.5*3.5 {
		return tVessel // carotid
	}
	if dx, dy := ax-26, ys-(n.airY+4); dx*dx+dy*dy < 5*5 {
		return tVessel // jugular
	}
	if ys > n.airY && ax < n.bodyW+4 {
		return tSoft
	}
	if ax < 10 {
		return tSoft
	}
	return tMuscle
}

// backMuscles classifies the posterior neck: muscles with thin fat
// planes between them and the nuchal ligament in the midline.
func (n *neck) backMuscles(ax, ys float64) tissue {
	if ys > n.canalA && ax > 4 {
		if f := ys + 0.5*ax; f-13*math.Floor(f/13) < 1.2 {
			return tFat
		}
	}
	if ax < 1.2 && ys > n.canalA+4 {
		return tCortex // nuchal ligament: a midline-only dark stripe
	}
	return tMuscle
}

// bodyTissue returns the tissue of the body/disc column at footprint value
// q (< 1), or tAir where z lies outside every body and disc.
func (n *neck) bodyTissue(q, ax float64, v, k int, dz, z float64) tissue {
	if k >= 0 && k < len(n.bulge) && math.Abs(dz) < n.discH/2 {
		if q > 0.55 {
			return tAnnulus
		}
		if n.dryDisc[k] {
			return tDiscDry
		}
		return tDisc
	}
	var lo, hi float64
	if v == 0 {
		lo, hi = 2*n.period+n.discH/2, n.c2TopZ
		if z >= hi && z < n.densTopZ && ax < 5 && q < 0.35 {
			return tMarrow // dens
		}
	} else {
		zc := (2.5 - float64(v)) * n.period
		lo, hi = zc-(n.period-n.discH)/2, zc+(n.period-n.discH)/2
	}
	if z < lo || z > hi {
		return tAir
	}
	if q > 0.75 || z-lo < 0.8 || hi-z < 0.8 {
		return tCortex
	}
	return tMarrow
}

// posterior returns the tissue of the posterior elements (pedicles,
// lateral masses, laminae, spinous processes) of vertebra v, or tAir.
func (n *neck) posterior(ax, ys, z float64, v int) tissue {
	var zc, half float64
	if v == 0 {
		zc, half = 2*n.period+n.discH/2+9, 10
	} else {
		zc, half = (2.5-float64(v))*n.period, (n.period-n.discH)/2
	}
	dz := z - zc
	// Lateral masses (articular pillars) at |x| 12-22 mm: parasagittal only.
	if ax > 12 && ax < 22 && ys > -6 && ys < 8 {
		return lateralMass(ax, ys, dz, half)
	}
	// Pedicles join the bodies to the lateral masses.
	if ax > n.canalB-1 && ax < 13 && ys > -n.canalA-1 && ys < -1 && math.Abs(dz) < half-2 {
		return tMarrow
	}
	if tt := n.lamina(ax, ys, dz, half); tt != tAir {
		return tt
	}
	return n.spinous(ax, ys, dz, v)
}

// lateralMass returns the articular pillar's marrow, cortex and facet
// joints at dz from its vertebra's centre (half its height).
func lateralMass(ax, ys, dz, half float64) tissue {
	if math.Abs(dz) > half+1 && math.Abs(dz) < half+2.2 {
		return tJoint
	}
	if math.Abs(dz) < half+1 {
		if ax < 13 || ax > 21 || ys < -5 || ys > 7 {
			return tCortex
		}
		return tMarrow
	}
	return tAir
}

// lamina returns the laminae, which slope posteriorly and caudally from
// the lateral masses, and the ligamentum flavum between them; tAir
// elsewhere.
func (n *neck) lamina(ax, ys, dz, half float64) tissue {
	inner := n.canalA*math.Sqrt(math.Max(0, 1-(ax*ax)/(n.canalB*n.canalB))) + 0.6
	if ax >= n.canalB {
		inner = 0.6
	}
	dzl := dz + 0.35*(ys-inner)
	if ax < 13 && ys > inner && ys < inner+4 {
		if math.Abs(dzl) < half-1 {
			return tMarrow
		}
		if math.Abs(dzl) < half+1.5 {
			return tCortex // ligamentum flavum
		}
	}
	return tAir
}

// spinous returns vertebra v's spinous process, midline only and
// slanting caudally; tAir elsewhere.
func (n *neck) spinous(ax, ys, dz float64, v int) tissue {
	if ax >= n.spinW || v >= len(n.spinLen) {
		return tAir
	}
	y0 := n.canalA + 4
	if ys <= y0 || ys >= y0+n.spinLen[v] {
		return tAir
	}
	dzs := dz + 0.45*(ys-y0)
	if math.Abs(dzs) >= 4.5 {
		return tAir
	}
	if ax > n.spinW-0.8 || math.Abs(dzs) > 3.7 {
		return tCortex
	}
	return tMarrow
}

// skull returns the tissue above the foramen magnum.
func (n *neck) skull(ax, ys float64) tissue {
	if ys > n.canalA+1 {
		if ys < n.canalA+7 {
			return tCortex
		}
		return tBrain
	}
	if ys < -n.canalA-1 && ys > -n.canalA-1-n.bodyAP && ax < 12 {
		return tMarrow // clivus
	}
	return tMuscle
}
