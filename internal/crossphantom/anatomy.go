package crossphantom

import (
	"math"
	"math/rand/v2"
)

// tissue is the class of one point of the analytic neck; a contrast table
// maps it to a signal.
type tissue uint8

const (
	tAir tissue = iota
	tSkin
	tFat
	tMuscle
	tSoft
	tCSF
	tCord
	tDura
	tEpidural
	tCortex
	tMarrow
	tNucleus
	tAnnulus
	tLigament
	tFacet
	tFlowVoid
	tBrain
	tMucosa
	tDiscDry // a dehydrated nucleus: darker on T2
	nTissues
)

// contrast is the signal of every tissue, before bias, gain and noise.
type contrast [nTissues]float64

// Relative T2 TSE signal levels, from memory of typical cervical spine
// images: CSF brightest, fat bright, cord and marrow intermediate, muscle
// dark, cortex, ligament and air near zero.
var t2Base = contrast{
	tAir: 0, tSkin: 0.32, tFat: 0.68, tMuscle: 0.17, tSoft: 0.28, tCSF: 1.0,
	tCord: 0.42, tDura: 0.08, tEpidural: 0.6, tCortex: 0.04, tMarrow: 0.36,
	tNucleus: 0.82, tAnnulus: 0.12, tLigament: 0.05, tFacet: 0.55,
	tFlowVoid: 0.02, tBrain: 0.45, tMucosa: 0.4, tDiscDry: 0.3,
}

// Relative T1 spin echo levels, from memory: fat and marrow bright, CSF
// dark, cord and muscle intermediate.
var t1Base = contrast{
	tAir: 0, tSkin: 0.45, tFat: 0.95, tMuscle: 0.3, tSoft: 0.38, tCSF: 0.1,
	tCord: 0.5, tDura: 0.1, tEpidural: 0.85, tCortex: 0.04, tMarrow: 0.72,
	tNucleus: 0.4, tAnnulus: 0.25, tLigament: 0.05, tFacet: 0.2,
	tFlowVoid: 0.02, tBrain: 0.5, tMucosa: 0.4, tDiscDry: 0.35,
}

// jitter returns base with every tissue's level scaled by up to ±frac, so
// no two studies share a contrast.
func jitter(base contrast, r *rand.Rand, frac float64) contrast {
	var c contrast
	for i, v := range base {
		c[i] = v * (1 + frac*(2*r.Float64()-1))
	}
	return c
}

// Number of vertebrae modelled below C1: C2 to T2 (T2 only so the column
// does not stop inside the field of view).
const nVert = 8

// neck is one study's analytic anatomy in its own frame: u to the
// patient's left, v posterior, w superior (mm), the origin on the cord
// axis near C4. Points are moved to patient coordinates (LPS,
// PS3.3 C.7.6.2.1.1) by rot and origin.
type neck struct {
	rot    mat // columns: the neck's u, v, w axes in LPS
	origin vec

	// hs is the per-height table, one entry every lutStep from lutW0;
	// curve is the lateral curve's amplitude.
	hs    []height
	curve float64
	// levels[at(weff)] is the vertebra whose body or lower disc holds
	// weff; bulges[at(weff)] the stenotic disc's reach there.
	levels []int8
	bulges []float64

	// Vertebrae C2..T2: body top and bottom along the column, body half
	// width (lateral), AP depth, spinous process length and angle.
	top, bot     [nVert]float64
	bw, bd       [nVert]float64
	spL, spTan   [nVert]float64
	spH          [nVert]float64
	bifid        [nVert]bool
	hydration    [nVert]bool // disc below vertebra i has a normal nucleus
	c2top, wFM   float64     // top of C2 body (dens base), foramen magnum
	canA, canP   float64     // canal front (body back wall) and back, from the cord axis
	canU         float64     // canal half width
	cordU, cordV float64     // cord semi-axes (lateral, AP)
	pedIn        float64     // pedicle inner face (lateral)
	lmOut        float64     // lateral mass outer face
	facetTan     float64     // facet joint slope in the sagittal plane
	vaU, vaV     float64     // vertebral artery centre
	vaR          float64
	stenosis     int     // the vertebra whose upper disc narrows the canal, -1 none
	bulge        float64 // its posterior reach into the canal, mm
	neckU, neckV float64 // skin outline semi-axes
	neckC        float64 // outline centre, AP
	fatA, fatP   float64 // subcutaneous fat thickness, anterior and posterior
	musU, musV   [2]float64
	musC         [2]float64 // paraspinal muscle centres (lateral), right then left
	musCV        float64
	airV         float64 // airway semi-axis AP
	airU         float64
	prevert      float64 // prevertebral soft tissue thickness
	nuchalV0     float64 // nuchal ligament posterior border at the occiput
}

// height is what the neck's shape gives one height w: the cord axis's
// lateral offset (the scoliosis-like curve) and AP offset (lordosis),
// the AP slope (so endplates stay perpendicular to the column), and the
// skin ellipse: inverse squared semi-axes, the smaller semi-axis m and
// the squared level inside which no point is skin or subcutaneous fat.
type height struct{ lat, lord, slope, invU2, invV2, invV, m, inner2 float64 }

const (
	lutW0   = -170.0
	lutStep = 0.25
	lutN    = 1600
)

// newNeck draws one study's anatomy.
func newNeck(r *rand.Rand) *neck {
	n := &neck{stenosis: -1}
	u := func(a, b float64) float64 { return a + (b-a)*r.Float64() }

	// Lordosis: the column bows anteriorly most near C5; a few studies are
	// straight or slightly kyphotic (common practice in describing neck
	// alignment). Amplitude and width from memory.
	lordD := u(-3, 11)
	lordC := u(-25, 0)
	lordH := u(35, 55)
	latA := u(0, 3.5)
	latL := u(160, 320)
	latP := u(0, 2*math.Pi)
	n.hs = make([]height, lutN)
	n.curve = latA
	for i := range lutN {
		w := lutW0 + float64(i)*lutStep
		g := math.Exp(-(w - lordC) * (w - lordC) / (2 * lordH * lordH))
		n.hs[i].lord = -lordD * g
		n.hs[i].slope = -lordD * g * (-(w - lordC) / (lordH * lordH))
		n.hs[i].lat = latA * math.Sin(2*math.Pi*w/latL+latP)
	}

	// Vertebral sizes, from memory of adult cervical anatomy: bodies about
	// 14 mm tall and 15-17 mm deep, discs 4-6 mm, C7 and T1 larger, the
	// C7 spinous process the longest ("vertebra prominens").
	scale := u(0.88, 1.12)
	heights := [nVert]float64{15, 13.5, 13.5, 13.5, 14, 14.5, 16, 17}
	discs := [nVert]float64{4.5, 5, 5.5, 5.5, 5.5, 5, 5, 5}
	spLen := [nVert]float64{24, 14, 14, 16, 21, 29, 31, 30}
	spAng := [nVert]float64{15, 25, 30, 32, 30, 25, 35, 45}
	bwid := [nVert]float64{8, 8, 8.5, 9, 9.5, 10.5, 12, 13}
	n.c2top = u(35, 45)
	w := n.c2top
	for i := range nVert {
		n.top[i] = w
		h := heights[i] * scale * u(0.95, 1.05)
		n.bot[i] = w - h
		w = n.bot[i] - discs[i]*scale*u(0.8, 1.15)
		n.bw[i] = bwid[i] * u(0.93, 1.07)
		n.bd[i] = u(14.5, 17) * scale
		n.spL[i] = spLen[i] * u(0.85, 1.15)
		n.spTan[i] = math.Tan(spAng[i] * u(0.8, 1.2) * math.Pi / 180)
		n.spH[i] = u(3.5, 5)
		n.bifid[i] = i >= 1 && i <= 3 && r.Float64() < 0.6
		n.hydration[i] = r.Float64() < 0.75
	}
	n.wFM = n.c2top + u(17, 21)
	n.canA = u(5.5, 7.5)
	n.canP = u(6.5, 9)
	n.canU = u(11, 13)
	// Cord about 10-12 mm wide and 7-8 mm deep (from memory; the brief's
	// ~10x7 mm).
	n.cordU = u(4.8, 6)
	n.cordV = u(3.3, 4)
	n.pedIn = n.canU - 0.5
	n.lmOut = u(22, 25)
	n.facetTan = math.Tan(u(35, 50) * math.Pi / 180)
	n.vaU = u(16, 19)
	n.vaV = -n.canA - u(2, 5)
	n.vaR = u(1.8, 2.6)
	if r.Float64() < 0.5 {
		n.stenosis = 1 + r.IntN(5) // the disc above vertebra stenosis: C2-C3 to C6-C7
		n.bulge = u(2, 5.5)
	}
	n.neckU = u(52, 66)
	n.neckV = u(58, 70)
	n.neckC = u(-12, -4)
	n.fatA = u(3, 8)
	n.fatP = u(5, 16)
	for s := range 2 {
		a := u(0.92, 1.08) // slight left/right asymmetry
		n.musC[s] = 20 * u(0.95, 1.05)
		n.musU[s] = (n.musC[s] - 0.9) * a
		n.musV[s] = 28 * a
	}
	n.musCV = n.canP + 20
	for i := range lutN {
		w := lutW0 + float64(i)*lutStep
		nu, nv := n.neckU, n.neckV
		if w > n.wFM {
			f := 1 + min(w-n.wFM, 60)/120
			nu *= f
			nv *= f
		}
		if w < -70 {
			nu *= 1 + min(-70-w, 60)/40
		}
		m := min(nu, nv)
		inner := 1 - (n.fatP+2)/m
		h := &n.hs[i]
		h.invU2, h.invV2, h.invV, h.m, h.inner2 = 1/(nu*nu), 1/(nv*nv), 1/nv, m, inner*inner
	}
	n.levels = make([]int8, lutN)
	n.bulges = make([]float64, lutN)
	for i := range lutN {
		w := lutW0 + float64(i)*lutStep
		n.levels[i] = int8(n.levelSearch(w))
		if n.stenosis >= 0 {
			c := (n.bot[n.stenosis-1] + n.top[n.stenosis]) / 2
			d := (w - c) / 4
			n.bulges[i] = n.bulge * math.Exp(-d*d)
		}
	}
	n.airU = u(9, 14)
	n.airV = u(5, 9)
	n.prevert = u(3, 6)
	n.nuchalV0 = u(38, 48)
	return n
}

// at returns the per-w table index for w.
func at(w float64) int {
	i := int((w - lutW0) / lutStep)
	if i < 0 {
		return 0
	}
	if i >= lutN {
		return lutN - 1
	}
	return i
}

// cordCentre is the cord axis at height w in the neck frame.
func (n *neck) cordCentre(w float64) vec {
	k := at(w)
	return vec{n.hs[k].lat, n.hs[k].lord, w}
}

// bone returns cortex within 1 mm of a bone's surface and marrow inside;
// depth is the distance inside the surface.
func bone(depth float64) tissue {
	if depth < 1.1 {
		return tCortex
	}
	return tMarrow
}

// tissueAt classifies the point (u, v, w) of the neck frame. The tests
// run from the outside in and from the most to the least specific, so
// most points leave early.
func (n *neck) tissueAt(u, v, w float64) tissue {
	ol := &n.hs[at(w)]
	uc := u - ol.lat
	vc := v - ol.lord
	au := math.Abs(uc)

	// Skin outline: an ellipse that widens over the skull and the
	// shoulders (per-w table); soft tissue follows the column's lordosis
	// only partly.
	vo := v - 0.4*ol.lord - n.neckC
	e := uc*uc*ol.invU2 + vo*vo*ol.invV2
	if e >= 1 {
		return tAir
	}
	// The square root is needed only near the skin: deeper than the
	// thickest fat layer, e is below inner2.
	if e > ol.inner2 {
		depth := (1 - math.Sqrt(e)) * ol.m
		if depth < 2 {
			return tSkin
		}
		fat := n.fatA
		if vo > 0 {
			fat += (n.fatP - n.fatA) * vo * ol.invV
		}
		if depth < fat {
			return tFat
		}
	}
	if w > n.wFM {
		return n.head(uc, vc, au, w)
	}
	weff := w + ol.slope*vc
	if weff > n.c2top {
		if t, ok := n.atlas(uc, vc, au, weff); ok {
			return t
		}
	}
	front := -n.canA - n.bd[n.level(weff)]
	switch {
	case vc < front-0.5:
		return n.anterior(uc, vc, au, w, front)
	case vc < -n.canA:
		return n.column(uc, vc, au, weff)
	}
	return n.posterior(uc, vc, au, w, weff)
}

// level is the vertebra whose body or the disc below it holds weff.
func (n *neck) level(weff float64) int { return int(n.levels[at(weff)]) }

// levelSearch computes level's table.
func (n *neck) levelSearch(weff float64) int {
	for i := range nVert {
		if i+1 < nVert && weff >= n.top[i+1] {
			return i
		}
	}
	return nVert - 1
}

// anterior classifies points in front of the vertebral bodies:
// prevertebral muscle, the pharynx and airway, anterior soft tissue.
func (n *neck) anterior(uc, vc, au, w, front float64) tissue {
	if vc > front-n.prevert && au < 14 {
		return tMuscle // longus colli
	}
	ac := front - n.prevert - 2 - n.airV
	scale := 1.0
	if w < -40 {
		scale = 0.75 // trachea narrower than the oropharynx
	}
	du := uc / (n.airU * scale)
	dv := (vc - ac) / n.airV
	if q := du*du + dv*dv; q < 1.6 {
		if q < 1 {
			return tAir
		}
		return tMucosa
	}
	if au > 28 && au < 46 && vc < front-12 && vc > front-40 {
		return tMuscle // sternocleidomastoid
	}
	return tSoft
}

// column classifies points between the bodies' front and the canal: the
// bodies, the discs, the vertebral arteries and the transverse processes.
func (n *neck) column(uc, vc, au, weff float64) tissue {
	i := n.level(weff)
	if weff < n.top[nVert-1]-40 {
		return tSoft
	}
	vcen := -n.canA - n.bd[i]/2
	// Vertebral artery flow voids from the lowest modelled level up to C2
	// (through the transverse foramina, from memory).
	if dv, du := vc-n.vaV, au-n.vaU; du*du+dv*dv < n.vaR*n.vaR && weff < n.c2top+4 {
		return tFlowVoid
	}
	inBody := weff <= n.top[i] && weff >= n.bot[i]
	if au > n.bw[i]+0.8 {
		// Transverse process around the artery, at body heights only.
		if inBody && au < 27 && vc > n.vaV-5 && vc < n.vaV+4 && weff < n.top[i]-2 && weff > n.bot[i]+2 {
			d := min(min(27-au, vc-(n.vaV-5)), n.vaV+4-vc)
			return bone(d)
		}
		return tMuscle
	}
	x := uc / n.bw[i]
	y := (vc - vcen) / (n.bd[i] / 2)
	if inBody {
		h := (n.top[i] - n.bot[i]) / 2
		z := (weff - (n.top[i]+n.bot[i])/2) / h
		x2, y2, z2 := x*x, y*y, z*z
		f := x2*x2 + y2*y2 + z2*z2
		if f > 1 {
			return tSoft
		}
		// Depth of a rounded block by its superellipse level, close enough
		// for a 1 mm cortex.
		d := (1 - math.Pow(f, 0.25)) * min(min(n.bw[i], n.bd[i]/2), h)
		return bone(d)
	}
	if i == nVert-1 {
		return tSoft
	}
	// Disc below vertebra i: the annulus fills the bodies' footprint, the
	// nucleus is an ellipsoid a little behind its centre.
	x2, y2 := x*x, y*y
	if x2*x2+y2*y2 > 1.05 {
		return tSoft
	}
	dtop, dbot := n.bot[i], n.top[i+1]
	z := (weff - (dtop+dbot)/2) / ((dtop - dbot) / 2)
	nx := uc / (0.55 * n.bw[i])
	ny := (vc - vcen - 0.12*n.bd[i]) / (0.3 * n.bd[i])
	if nx*nx+ny*ny+z*z/0.45 < 1 {
		if n.hydration[i] {
			return tNucleus
		}
		return tDiscDry
	}
	return tAnnulus
}

// bulgeAt is how far the stenotic disc pushes the canal's front wall
// back at weff: a Gaussian bump 4 mm wide about the disc's middle.
func (n *neck) bulgeAt(weff float64) float64 { return n.bulges[at(weff)] }

// posterior classifies points behind the bodies' back wall: the canal,
// pedicles, lateral masses and facets, laminae, spinous processes,
// ligaments and the paraspinal muscles.
func (n *neck) posterior(uc, vc, au, w, weff float64) tissue {
	i := n.level(weff)
	low := weff < n.bot[nVert-1]-10
	// Canal: the dural sac (CSF around the cord) inside epidural fat.
	back := n.canP - 0.35*au*au/n.canU
	if au < n.canU && vc < back && !low {
		return n.sac(uc, vc, weff)
	}
	if t, ok := n.lateralBone(au, vc, weff, i, low); ok {
		return t
	}
	// Laminae and the ligamentum flavum between them.
	if au < n.pedIn+2 && vc >= back && vc < back+3 && !low {
		mid := (n.top[i]+n.bot[i])/2 - 3
		if weff > mid-6 && weff < mid+5 {
			return bone(min(vc-back, back+3-vc) + 0.6)
		}
		return tLigament
	}
	if t, ok := n.spinous(au, vc, weff); ok {
		return t
	}
	if n.midlineLigament(au, vc, w) {
		return tLigament
	}
	return n.paraspinal(uc, vc, au)
}

// sac classifies a point inside the bony canal: the dural sac (CSF
// around the cord), its wall, epidural fat and a bulging disc.
func (n *neck) sac(uc, vc, weff float64) tissue {
	// The sac is an ellipse inside the bony canal, so its lateral
	// recesses are shallow; posterior epidural fat fills the corners.
	du := n.canU - 0.8
	dc := (n.canP - 1.2 - n.canA) / 2
	dv := (n.canP - 1.2 + n.canA) / 2
	x, y := uc/du, (vc-dc)/dv
	q := x*x + y*y
	b := n.bulgeAt(weff) * max(1-x*x, 0)
	front := -n.canA + b
	if vc < front {
		return tAnnulus // the bulging disc
	}
	if q >= 1 {
		return tEpidural
	}
	if q > 0.85 || vc < front+0.5 {
		return tDura
	}
	// The cord, flattened where the sac's front comes within reach.
	cf, cb := -n.cordV, n.cordV
	if front+0.6 > cf {
		cf = front + 0.6
	}
	cu := n.cordU
	if weff < n.bot[5] {
		cu *= 0.85 // thoracic cord narrower than the cervical enlargement
	}
	if cb-cf < 2*n.cordV {
		cu *= 1 + 0.15*(1-(cb-cf)/(2*n.cordV))
	}
	cv := (cb + cf) / 2
	hv := (cb - cf) / 2
	if x, y := uc/cu, (vc-cv)/hv; x*x+y*y < 1 {
		return tCord
	}
	return tCSF
}

// lateralBone classifies the pedicles, the lateral masses with their
// facet joints and the foraminal fat beside the canal; ok is false
// elsewhere.
func (n *neck) lateralBone(au, vc, weff float64, i int, low bool) (tissue, bool) {
	inBody := weff <= n.top[i] && weff >= n.bot[i]
	// Pedicles: the canal's side walls in the upper part of each body.
	if au >= n.pedIn && au < n.pedIn+4.5 && vc < 1 && inBody && weff > n.bot[i]+0.4*(n.top[i]-n.bot[i]) {
		return bone(min(au-n.pedIn, n.pedIn+4.5-au)), true
	}
	// Lateral masses: a column of bone cut by the oblique facet joints.
	if au >= n.pedIn && au < n.lmOut && vc >= -1 && vc < 11 && !low {
		g := math.Inf(1)
		for j := max(i-1, 0); j <= min(i+1, nVert-2); j++ {
			jw := (n.bot[j]+n.top[j+1])/2 + 1.5
			if d := math.Abs(weff - jw + (vc-5)*n.facetTan); d < g {
				g = d
			}
		}
		switch {
		case g < 0.7:
			return tFacet, true
		case g < 1.7:
			return tCortex, true
		}
		d := min(min(au-n.pedIn, n.lmOut-au), min(vc+1, 11-vc))
		return bone(min(d, g-0.6)), true
	}
	if au >= n.pedIn && vc < 0 {
		if low {
			return tMuscle, true
		}
		return tEpidural, true // neural foramen fat
	}
	return 0, false
}

// spinous classifies the spinous processes in the midline, sloping down
// posteriorly; ok is false outside them.
func (n *neck) spinous(au, vc, weff float64) (tissue, bool) {
	base := n.canP + 2
	if au >= 4.5 || vc < base {
		return 0, false
	}
	for j := range nVert {
		if vc > base+n.spL[j] {
			continue
		}
		c := (n.top[j]+n.bot[j])/2 - 2 - (vc-base)*n.spTan[j]
		half := 3.5 - 1.2*(vc-base)/n.spL[j]
		if n.bifid[j] && vc > base+n.spL[j]-5 {
			if au < 1 || au > 4 {
				continue
			}
		} else if au > half {
			continue
		}
		if d := math.Abs(weff - c); d < n.spH[j] {
			return bone(min(n.spH[j]-d, min(base+n.spL[j]-vc, half-au)) + 0.3), true
		}
	}
	return 0, false
}

// midlineLigament reports the ligaments in the midline: interspinous
// between the processes, the nuchal ligament from the C7 tip up to the
// occiput.
func (n *neck) midlineLigament(au, vc, w float64) bool {
	base := n.canP + 2
	c7tip := base + n.spL[5]
	c7w := (n.top[5]+n.bot[5])/2 - 2 - n.spL[5]*n.spTan[5]
	if w > c7w {
		t := min((w-c7w)/(n.wFM+15-c7w), 1)
		border := c7tip + t*(n.nuchalV0-c7tip)
		half := 0.9
		if vc > border-5 {
			half = 2.5
		}
		return au < half && vc < border && vc > base
	}
	return au < 1.2 && vc > base && vc < base+n.spL[6]
}

// paraspinal classifies the rest behind the column: the paraspinal
// muscles and the fat around them.
func (n *neck) paraspinal(uc, vc, au float64) tissue {
	// Paraspinal muscles, one boxy mass each side reaching to the nuchal
	// septum, with two curved intermuscular fat planes (from memory: the
	// semispinalis, splenius and trapezius layers).
	s := 0
	if uc > 0 {
		s = 1
	}
	x := (au - n.musC[s]) / n.musU[s]
	y := (vc - n.musCV) / n.musV[s]
	x2, y2 := x*x, y*y
	if q := x2*x2 + y2*y2; q < 1 {
		// Fat planes run along the neck between the muscle layers.
		if d := vc - (n.musCV - 6 + 0.3*au); d > 0 && d < 1.2 {
			return tFat
		}
		if d := vc - (n.musCV + 9 - 0.15*au); d > 0 && d < 1.2 {
			return tFat
		}
		return tMuscle
	}
	if vc < n.canP+6 {
		return tMuscle
	}
	return tFat
}

// atlas classifies the C1 ring and the dens, above the C2 body; ok is
// false where the point belongs to the ordinary column or canal.
func (n *neck) atlas(uc, vc, au, weff float64) (tissue, bool) {
	h := weff - n.c2top
	vd := -n.canA - n.bd[0]/2 + 1
	// Dens: a peg rising from the C2 body.
	if du := vc - vd; h < 14 && uc*uc+du*du < 5.5*5.5 {
		return bone(5.5 - math.Sqrt(uc*uc+du*du)), true
	}
	// Anterior arch of C1 in front of the dens.
	if au < 11 {
		dv := (vc - (vd - 10)) / 3.5
		dw := (h - 9) / 5
		if q := dv*dv + dw*dw; q < 1 {
			return bone((1 - math.Sqrt(q)) * 3.5), true
		}
	}
	// Transverse ligament behind the dens.
	if au < 9 && vc > vd+5.5 && vc < vd+7.5 && h > 5 && h < 11 {
		return tLigament, true
	}
	// Lateral masses of C1.
	if au > 10 && au < 22 && vc > vd-7 && vc < 5 && h > 1.5 && h < 15 {
		if h < 2.5 {
			return tFacet, true
		}
		return bone(min(min(au-10, 22-au), min(h-2.5, 15-h))), true
	}
	// Posterior arch with its midline tubercle.
	cv := n.canP + 4.5
	rv, rw := 3.2, 3.5
	if au < 5 {
		rv, rw = 4.5, 5
	}
	if au < 22 {
		dv := (vc - cv) / rv
		dw := (h - 9) / rw
		if q := dv*dv + dw*dw; q < 1 {
			return bone((1 - math.Sqrt(q)) * rv), true
		}
	}
	// Anterior to the dens and arch above C2: the clivus region's soft
	// tissue and the nasopharynx are the ordinary anterior classes.
	if vc < vd-14 {
		return 0, false
	}
	if vc < -n.canA && au < 24 {
		return tSoft, true
	}
	return 0, false
}

// head classifies the skull base and posterior fossa above the foramen
// magnum: occipital bone, clivus, brainstem, cisterns and cerebellum.
func (n *neck) head(uc, vc, au, w float64) tissue {
	h := w - n.wFM
	// Brainstem continues the cord, widening into the medulla and pons.
	bs := brainstem{
		v: -1.0 - 0.1*h,
		u: n.cordU * (1.3 + min(h, 40)/40),
		d: n.cordV * (1.4 + min(h, 40)/40),
	}
	if t, ok := n.skullBase(uc, vc, au, h); ok {
		return t
	}
	if x, y := uc/bs.u, (vc-bs.v)/bs.d; x*x+y*y < 1 {
		return tCord
	}
	if t, ok := fossaShell(uc, vc, au, h, bs); ok {
		return t
	}
	return fossaContents(vc, au, h, bs)
}

// brainstem is the medulla's and pons's centre and half-widths at one
// height above the foramen magnum.
type brainstem struct{ v, u, d float64 }

// skullBase classifies the clivus, a bar of bone rising anteriorly from
// the basion, and the soft tissue and airway in front of it; ok is false
// behind it.
func (n *neck) skullBase(uc, vc, au, h float64) (tissue, bool) {
	vd := -n.canA - n.bd[0]/2 + 1
	cl := vd - 2 - h*0.55
	if au < 13 && vc < cl+5 && vc > cl-5 && h < 45 {
		return bone(min(5-math.Abs(vc-cl), 13-au)), true
	}
	if vc < cl-5 {
		du := uc / (n.airU * 1.2)
		dv := (vc - (cl - 5 - n.airV - 3)) / n.airV
		if du*du+dv*dv < 1 && h < 25 {
			return tAir, true
		}
		return tSoft, true
	}
	return 0, false
}

// fossaShell classifies the posterior fossa's ellipsoid shell of
// occipital bone, open at the foramen magnum, and the muscle outside it;
// ok is false inside.
func fossaShell(uc, vc, au, h float64, bs brainstem) (tissue, bool) {
	pv, pw := 12.0, 36.0
	ru, rv, rw := 52.0, 44.0, 40.0
	x, y, z := uc/ru, (vc-pv)/rv, (h-pw)/rw
	q := x*x + y*y + z*z
	open := h < 8 && au < 16 && vc > bs.v-6 && vc < 24
	switch {
	case q > 1.45:
		return tMuscle, true
	case q > 1.0 && !open:
		d := (math.Sqrt(q) - 1) * 44
		if d < 1.5 || d > 6 {
			return tCortex, true
		}
		return tMarrow, true
	case q > 1.0:
		return tCSF, true
	}
	return 0, false
}

// fossaContents classifies the inside of the posterior fossa: the
// cisterns, the fourth ventricle and the cerebellum.
func fossaContents(vc, au, h float64, bs brainstem) tissue {
	// Cisterna magna behind the medulla and the fourth ventricle.
	if h < 22 && vc > bs.v+bs.d && vc < bs.v+bs.d+10+0.3*h && au < 18 {
		return tCSF
	}
	if d := (vc - (bs.v + bs.d + 3)); h > 18 && h < 34 && au < 6 && d > 0 && d < 5 {
		return tCSF
	}
	if vc < bs.v+bs.d+1 && vc > bs.v-bs.d-1.5 && au < bs.u+1.5 {
		return tCSF
	}
	// Cerebellar folia: thin CSF-filled sulci, concentric about the
	// fourth ventricle.
	r := math.Hypot(vc-(bs.v+bs.d+5), h-26)
	if math.Sin(r*0.9+1.5*math.Sin(0.2*au)+1.2*math.Sin(0.13*h)) > 0.94 {
		return tCSF
	}
	return tBrain
}
