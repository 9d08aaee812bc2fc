// Package crossphantom is a second, independently written family of
// synthetic cervical spine studies, for validating the midline picker on
// data it was not tuned on.
//
// Each study images its own analytic neck (vertebral bodies C2 to T2 with
// discs, the canal with CSF around the cord, pedicles, lateral masses and
// facets, laminae, midline spinous processes and ligaments, paraspinal
// muscles, fat and skin, the airway, the vertebral arteries and the
// posterior fossa) in patient coordinates (LPS, PS3.3 C.7.6.2.1.1). The
// neck is shifted, yawed and rolled and bends a little to one side, so
// its midline is not a scanner plane nor exactly a plane at all. A
// sagittal T2 series images it with partial volume across each slice,
// a coil bias field and Rician noise, written as DICOM MR Image Storage
// files in Explicit VR Little Endian.
//
// The truth midline is the plane fitted by least squares to the cord
// centreline (see Truth). The one way to use it:
//
//	cfg := crossphantom.DefaultConfig(7)
//	for i := range 100 {
//		files, truth, err := crossphantom.Study(cfg, i)
//		...
//	}
//
// Output is deterministic for a given Config and index; consecutive
// indices cycle through the scenarios and slice-thickness bands, so any
// run of 20 indices is balanced (see DefaultConfig).
package crossphantom

import (
	"encoding/json"
	"fmt"
	"math"
	"math/rand/v2"
	"os"
	"path/filepath"

	"github.com/midsag/midsag/internal/atomicfile"
)

// Scenario names how a study's target series holds the midline.
type Scenario string

// The scenarios of the brief; every one varies thickness, slab width,
// matrix, pixel spacing and orientation conventions.
const (
	// Centred puts the midline within about a slice of the slab centre.
	Centred Scenario = "centred"
	// Offset puts it 1 to 6 slices off centre, or 0 to 2 slices from an
	// edge slice.
	Offset Scenario = "offset"
	// LateralOnly images one side only: the midline is at least 2
	// slices (and 3 mm) beyond the slab's edge slice.
	LateralOnly Scenario = "lateral_only"
	// Partial drops a contiguous run of slices at one end of the series,
	// as an interrupted transfer does; Images in Acquisition (0020,1002)
	// still gives the acquired count and the sent slices keep their
	// Instance Numbers. About half keep the midline.
	Partial Scenario = "partial"
	// Thick uses 3 to 4 mm slices, centred or offset.
	Thick Scenario = "thick"
)

// Scenarios lists every scenario in the order DefaultConfig cycles them.
func Scenarios() []Scenario {
	return []Scenario{Centred, Offset, LateralOnly, Partial, Thick}
}

// Config chooses a family of studies.
type Config struct {
	// Seed makes the family reproducible; every study is drawn from
	// (Seed, index).
	Seed int64
	// Scenarios are cycled by study index; empty means all five.
	Scenarios []Scenario
	// DistractorRate is the fraction of studies that also hold a
	// sagittal T1 series and an axial T2 series.
	DistractorRate float64
}

// DefaultConfig is the evaluation family: all five scenarios in turn,
// and within each scenario four slice-thickness bands in turn (1-1.5,
// 2-2.5, 3-3.5 and 4 mm; 3, 3.5, 4 and 4 mm for Thick), so indices 0 to
// 20k-1 hold k studies of every scenario and band. A quarter of the
// studies carry distractor series.
func DefaultConfig(seed int64) Config {
	return Config{Seed: seed, Scenarios: Scenarios(), DistractorRate: 0.25}
}

// File is one DICOM Part 10 file of a study; Name is a relative path.
type File struct {
	Name string
	Data []byte
}

// Truth is what a study holds, for scoring a midline picker.
//
// The truth midline plane is the least-squares plane through the cord
// centreline: the nominal cord axis sampled every 2 mm from the bottom of
// T1 to the top of C2, in patient coordinates, fitted as x = a + b·y +
// c·z (x the patient's left-right coordinate). Its centroid C lies on it.
// Slices are ordered along the slab normal n = row × column of Image
// Orientation (Patient) (PS3.3 C.7.6.2.1.1), by Image Position (Patient)
// · n. SliceDistanceMM[i] = (IPP_i − C) · n is the signed distance from
// the plane, at the cord, to slice i's plane; with the few degrees
// between the plane and the slices it differs from the plane-to-plane
// distance by under 1%.
type Truth struct {
	// Index is the study's index in its family.
	Index int `json:"index"`
	// Scenario is how the target series holds the midline.
	Scenario Scenario `json:"scenario"`
	// StudyInstanceUID and SeriesInstanceUID identify the study and the
	// target sagittal T2 series.
	StudyInstanceUID  string `json:"study_instance_uid"`
	SeriesInstanceUID string `json:"series_instance_uid"`
	// SliceCount is the number of target-series files written;
	// ImagesInAcquisition the number acquired, which differs for Partial.
	SliceCount          int `json:"slice_count"`
	ImagesInAcquisition int `json:"images_in_acquisition"`
	// SpacingMM is Spacing Between Slices (0018,0088), ThicknessMM Slice
	// Thickness (0018,0050), PixelSpacingMM both values of (0028,0030).
	SpacingMM      float64 `json:"spacing_mm"`
	ThicknessMM    float64 `json:"thickness_mm"`
	PixelSpacingMM float64 `json:"pixel_spacing_mm"`
	Rows           int     `json:"rows"`
	Columns        int     `json:"columns"`
	// MidlineIndex is the index, in order along the normal, of the slice
	// nearest the plane at the cord, or -1 when no slice is within half
	// a spacing of it (the midline is not in the slab).
	MidlineIndex int  `json:"midline_index"`
	InSlab       bool `json:"in_slab"`
	// MidlineDistanceMM is the plane's signed position along n relative
	// to the nearest slice's centre when InSlab, else relative to the
	// slab's nearer edge (the edge slice's centre ± half a spacing);
	// positive along n.
	MidlineDistanceMM float64 `json:"midline_distance_mm"`
	// MidlineSOPInstanceUID is the midline slice's SOP Instance UID, empty
	// when not InSlab.
	MidlineSOPInstanceUID string `json:"midline_sop_instance_uid"`
	// SOPInstanceUIDs, InstanceNumbers and SliceDistanceMM are per slice
	// of the target series, in order along n.
	SOPInstanceUIDs []string  `json:"sop_instance_uids"`
	InstanceNumbers []int     `json:"instance_numbers"`
	SliceDistanceMM []float64 `json:"slice_distance_mm"`
	// Plane is the truth midline plane; SlabNormal is n.
	Plane      Plane      `json:"plane"`
	SlabNormal [3]float64 `json:"slab_normal"`
	// YawDeg, RollDeg and CurveMM describe the neck's pose: rotation about
	// the superior-inferior and anterior-posterior axes, and the amplitude
	// of its lateral curve.
	YawDeg  float64 `json:"yaw_deg"`
	RollDeg float64 `json:"roll_deg"`
	CurveMM float64 `json:"curve_mm"`
	// StenosisLevel names the disc that narrows the canal, or "".
	StenosisLevel string `json:"stenosis_level"`
	// Distractors are the other series' instance UIDs.
	Distractors []string `json:"distractors"`
}

// discNames names the disc below each modelled vertebra.
var discNames = [nVert]string{"C2-C3", "C3-C4", "C4-C5", "C5-C6", "C6-C7", "C7-T1", "T1-T2", ""}

// Series descriptions seen on sagittal T2 protocols (from memory of
// several vendors' naming habits).
var t2Names = []string{"SAG T2 TSE", "t2_tse_sag", "Sag T2 FSE", "T2W_TSE SAG", "sag t2 frfse", "SAG T2"}

// rng is a study's random source: PCG seeded from the family seed and the
// study index, so studies are independent of each other and of order.
func rng(seed int64, index int, stream uint64) *rand.Rand {
	return rand.New(rand.NewPCG(uint64(seed)^0x6a09e667f3bcc908, uint64(index)*0x9e3779b97f4a7c15+stream))
}

// Study generates study index of cfg's family: its files, in no
// particular order, and its truth.
func Study(cfg Config, index int) ([]File, Truth, error) {
	pl, err := plan(cfg, index)
	if err != nil {
		return nil, Truth{}, err
	}
	return pl.emit(cfg, true)
}

// studyPlan is a study drawn but not yet rendered.
type studyPlan struct {
	nk    *neck
	s     *series
	p     *protocol
	h     mrHeader
	lay   slab
	c     vec // the cord centroid, on the truth plane
	t     Truth
	r     *rand.Rand
	noise *rand.Rand
}

// plan draws study index's anatomy, geometry and protocol.
func plan(cfg Config, index int) (*studyPlan, error) {
	if index < 0 {
		return nil, fmt.Errorf("crossphantom: study index %d is negative", index)
	}
	scen := cfg.Scenarios
	if len(scen) == 0 {
		scen = Scenarios()
	}
	sc := scen[index%len(scen)]
	band := (index / len(scen)) % 4
	r := rng(cfg.Seed, index, 1)

	nk := newNeck(r)
	u := func(a, b float64) float64 { return a + (b-a)*r.Float64() }
	yaw, roll, pitch := u(-4, 4), u(-3, 3), u(-8, 8)
	nk.rot = rotZ(deg(yaw)).mul(rotY(deg(roll))).mul(rotX(deg(pitch)))
	nk.origin = vec{u(-12, 12), u(-10, 10), u(-15, 15)}

	var pts []vec
	for w := nk.bot[6]; w <= nk.c2top; w += 2 {
		pts = append(pts, nk.rot.apply(nk.cordCentre(w)).add(nk.origin))
	}
	plane := fitMidline(pts)
	c := vec(plane.Point)

	thick := thicknessFor(sc, band, r)
	gap := 0.0
	if r.Float64() < 0.4 {
		gap = thick * u(0.1, 0.3)
	}
	sp := thick + gap
	lay := layout(sc, sp, r)

	// In-plane geometry: rows run superior-inferior (or the reverse),
	// columns anterior-posterior either way, with a slight oblique.
	rows := []int{192, 224, 256, 288, 320}[r.IntN(5)]
	cols := rows
	if r.Float64() < 0.3 {
		cols = rows - rows/8
	}
	pix := min(max(u(180, 250)/float64(rows), 0.5), 1.0)
	pix = math.Round(pix*1000) / 1000
	row0 := vec{0, 1, 0}
	if r.Float64() < 0.35 {
		row0 = vec{0, -1, 0}
	}
	col0 := vec{0, 0, -1}
	if r.Float64() < 0.15 {
		col0 = vec{0, 0, 1}
	}
	q := rotZ(deg(u(-4, 4))).mul(rotY(deg(u(-2, 2)))).mul(rotX(deg(u(-3, 3))))
	s := &series{rows: rows, cols: cols, spacing: pix, thickness: thick, gap: gap}
	s.row = q.apply(row0)
	s.col = q.apply(col0)
	s.normal = s.row.cross(s.col)
	// Field-of-view centre: in front of the cord, somewhere between C2
	// and C6, as a technologist centres a cervical spine.
	f := c.add(nk.rot.apply(vec{0, u(-22, -6), u(-15, 15)}))
	s0 := c.dot(s.normal) - lay.mid*sp
	s.positions = make([]vec, lay.acquired)
	for i := range lay.acquired {
		si := s0 + float64(i)*sp
		centre := f.add(s.normal.scale(si - f.dot(s.normal)))
		s.positions[i] = centre.sub(s.row.scale(float64(cols-1) / 2 * pix)).sub(s.col.scale(float64(rows-1) / 2 * pix))
	}
	s.contrast = jitter(t2Base, r, 0.1)
	// SNR grows with voxel volume (from memory: SNR ∝ voxel volume at a
	// fixed scan time); the reference is a 3 mm slice of 0.8 mm pixels.
	s.snr = min(max(u(10, 30)*thick*pix*pix/(3*0.64), 5), 60)
	s.gain = u(1800, 3400)
	s.biasC = c.add(nk.rot.apply(vec{0, 40, 0}))
	s.bias = [6]float64{u(0.3, 0.8), u(0, 0.5), u(-0.6, -0.1), u(-0.15, 0.15), u(-0.2, 0.2), u(-0.3, 0)}

	h := header(r, index)
	p := &protocol{
		seriesUID:   newUID(r),
		number:      2 + r.IntN(6),
		description: t2Names[r.IntN(len(t2Names))],
		seqName:     "tse2d1",
		tr:          math.Round(u(2500, 4500)),
		te:          math.Round(u(90, 120)),
		etl:         12 + r.IntN(13),
		flip:        []float64{90, 120, 150, 160}[r.IntN(4)],
		averages:    float64(1 + r.IntN(3)),
		bandwidth:   math.Round(u(150, 300)),
		acquired:    lay.acquired,
		writeAcq:    sc == Partial || r.Float64() < 0.8,
		reverse:     r.Float64() < 0.5,
	}

	t := Truth{
		Index: index, Scenario: sc,
		StudyInstanceUID: h.studyUID, SeriesInstanceUID: p.seriesUID,
		ImagesInAcquisition: lay.acquired,
		SpacingMM:           sp, ThicknessMM: thick, PixelSpacingMM: pix,
		Rows: rows, Columns: cols,
		Plane: plane, SlabNormal: s.normal,
		YawDeg: yaw, RollDeg: roll, CurveMM: nk.curve,
	}
	if nk.stenosis >= 0 {
		t.StenosisLevel = discNames[nk.stenosis-1]
	}

	return &studyPlan{nk: nk, s: s, p: p, h: h, lay: lay, c: c, t: t, r: r, noise: rng(cfg.Seed, index, 2)}, nil
}

// emit renders and encodes a planned study; without render it only
// completes the truth, which tests of the layout use.
func (pl *studyPlan) emit(cfg Config, render bool) ([]File, Truth, error) {
	nk, s, p, h, lay, c, t, r, noise := pl.nk, pl.s, pl.p, pl.h, pl.lay, pl.c, pl.t, pl.r, pl.noise
	rows, cols, sp := s.rows, s.cols, s.thickness+s.gap
	var files []File
	names := map[string]bool{}
	name := func(series int) string {
		for {
			n := fileName(series, r)
			if !names[n] {
				names[n] = true
				return n
			}
		}
	}
	px := make([]uint16, rows*cols)
	for i := lay.first; i < lay.first+lay.sent; i++ {
		inst := i + 1
		if p.reverse {
			inst = lay.acquired - i
		}
		uid := newUID(r)
		fn := name(p.number) // drawn either way, so UIDs do not depend on render
		if render {
			s.render(nk, i, noise, px)
			files = append(files, File{Name: fn, Data: mrInstance(&h, p, s, i, inst, uid, px)})
		}
		d := s.positions[i].sub(c).dot(s.normal)
		t.SOPInstanceUIDs = append(t.SOPInstanceUIDs, uid)
		t.InstanceNumbers = append(t.InstanceNumbers, inst)
		t.SliceDistanceMM = append(t.SliceDistanceMM, d)
	}
	t.SliceCount = len(t.SliceDistanceMM)
	t.MidlineIndex, t.MidlineDistanceMM = midline(t.SliceDistanceMM, sp)
	t.InSlab = t.MidlineIndex >= 0
	if t.InSlab {
		t.MidlineSOPInstanceUID = t.SOPInstanceUIDs[t.MidlineIndex]
	}

	if r.Float64() < cfg.DistractorRate && render {
		extra, uids := distractors(nk, s, &h, p, r, noise, name)
		files = append(files, extra...)
		t.Distractors = uids
	}
	r.Shuffle(len(files), func(i, j int) { files[i], files[j] = files[j], files[i] })
	return files, t, nil
}

// midline finds the slice nearest the plane from the per-slice distances
// (slice minus plane, along n) and the plane's position relative to it or
// to the slab's nearer edge.
func midline(d []float64, sp float64) (int, float64) {
	best := 0
	for i := range d {
		if math.Abs(d[i]) < math.Abs(d[best]) {
			best = i
		}
	}
	if math.Abs(d[best]) <= sp/2 {
		return best, -d[best]
	}
	if -d[0] < 0 {
		return -1, -d[0] + sp/2
	}
	return -1, -d[len(d)-1] - sp/2
}

// slab is where the target series' slices sit relative to the midline.
type slab struct {
	acquired    int     // slices acquired
	first, sent int     // the run of slices written
	mid         float64 // the plane's fractional slice index
}

// thicknessFor draws a slice thickness for a scenario and thickness band.
func thicknessFor(sc Scenario, band int, r *rand.Rand) float64 {
	lo := []float64{1, 2, 3, 4}[band]
	if sc == Thick {
		lo = []float64{3, 3.5, 4, 4}[band]
		return lo
	}
	if lo == 4 {
		return 4
	}
	return lo + 0.5*float64(r.IntN(2))
}

// layout places the midline in a slab of the scenario's kind. The
// plane's fractional index is an integer plus up to ±0.35 so the nearest
// slice is never a tie.
func layout(sc Scenario, sp float64, r *rand.Rand) slab {
	frac := 0.7 * (r.Float64() - 0.5)
	// At most 110 mm of slab (common practice: a cervical sagittal slab
	// spans the neck, not more), and 12 to 40 slices.
	maxN := min(40, int(110/sp))
	n := 12 + r.IntN(max(maxN-12, 0)+1)
	centre := float64(n-1) / 2
	switch sc {
	case Centred:
		k := int(math.Round(centre + 2*(r.Float64()-0.5)))
		return slab{acquired: n, sent: n, mid: float64(k) + frac}
	case Offset, Thick:
		if sc == Thick && r.Float64() < 0.5 {
			k := int(math.Round(centre + 2*(r.Float64()-0.5)))
			return slab{acquired: n, sent: n, mid: float64(k) + frac}
		}
		var k int
		if r.Float64() < 0.5 {
			k = r.IntN(3) // 0 to 2 slices from an edge
		} else {
			k = int(math.Round(centre)) - 1 - r.IntN(6)
		}
		k = max(k, 0)
		if r.Float64() < 0.5 {
			k = n - 1 - k
		}
		return slab{acquired: n, sent: n, mid: float64(k) + frac}
	case LateralOnly:
		n = 6 + r.IntN(max(min(20, int(60/sp))-6, 0)+1)
		g := max(2+r.IntN(5), int(math.Ceil(3/sp)))
		frac = 0.35 * r.Float64() // away from the slab, never towards it
		if r.Float64() < 0.5 {
			return slab{acquired: n, sent: n, mid: float64(-g) - frac}
		}
		return slab{acquired: n, sent: n, mid: float64(n-1+g) + frac}
	}
	// Partial: the full series is centred or offset; a run at one end is
	// lost. keep says whether the midline slice survives.
	k := int(math.Round(centre)) + r.IntN(7) - 3
	keep := r.Float64() < 0.5
	lowEnd := r.Float64() < 0.5
	before := k        // slices below the midline slice
	after := n - 1 - k // slices above it
	minDrop := (n + 3) / 4
	pick := func(lo, hi int) int { return lo + r.IntN(hi-lo+1) }
	if keep {
		if lowEnd && before < minDrop {
			lowEnd = false
		} else if !lowEnd && after < minDrop {
			lowEnd = true
		}
		if lowEnd {
			d := pick(minDrop, before)
			return slab{acquired: n, first: d, sent: n - d, mid: float64(k) + frac}
		}
		d := pick(minDrop, after)
		return slab{acquired: n, sent: n - d, mid: float64(k) + frac}
	}
	// Lose the midline: drop past it, leaving at least 3 slices.
	if lowEnd && before+1 > n-3 {
		lowEnd = false
	} else if !lowEnd && after+1 > n-3 {
		lowEnd = true
	}
	if lowEnd {
		d := pick(max(before+1, minDrop), n-3)
		return slab{acquired: n, first: d, sent: n - d, mid: float64(k) + frac}
	}
	d := pick(max(after+1, minDrop), n-3)
	return slab{acquired: n, sent: n - d, mid: float64(k) + frac}
}

// header draws a study's patient and study identification: synthetic,
// of a fictional screening cohort.
func header(r *rand.Rand, index int) mrHeader {
	sex := "F"
	if r.Float64() < 0.5 {
		sex = "M"
	}
	age := 30 + r.IntN(50)
	y, m, d := 2024+r.IntN(3), 1+r.IntN(12), 1+r.IntN(28)
	return mrHeader{
		studyUID:    newUID(r),
		forUID:      newUID(r),
		patientName: fmt.Sprintf("PHANTOM^CROSS%04d", index),
		patientID:   fmt.Sprintf("XPH%06d", index),
		birth:       fmt.Sprintf("%04d%02d%02d", y-age, m, d),
		sex:         sex,
		age:         fmt.Sprintf("%03dY", age),
		weight:      math.Round(55 + 40*r.Float64()),
		date:        fmt.Sprintf("%04d%02d%02d", y, m, d),
		time:        fmt.Sprintf("%02d%02d%02d", 7+r.IntN(12), r.IntN(60), r.IntN(60)),
		accession:   fmt.Sprintf("XA%07d", r.IntN(10000000)),
		studyID:     fmt.Sprintf("%d", 1+r.IntN(9999)),
		field:       []float64{1.5, 3}[r.IntN(2)],
	}
}

// distractors renders a sagittal T1 series on the target's acquired slab
// and an axial T2 series across C3 to C6, which a series picker must pass
// over.
func distractors(nk *neck, t2 *series, h *mrHeader, t2p *protocol, r *rand.Rand, noise *rand.Rand, name func(int) string) ([]File, []string) {
	u := func(a, b float64) float64 { return a + (b-a)*r.Float64() }
	var files []File
	var uids []string

	t1 := *t2
	t1.contrast = jitter(t1Base, r, 0.1)
	p1 := &protocol{
		seriesUID: newUID(r), number: t2p.number + 10,
		description: []string{"SAG T1 TSE", "t1_tse_sag", "Sag T1 FSE"}[r.IntN(3)],
		seqName:     "tse2d1", tr: math.Round(u(450, 700)), te: math.Round(u(8, 14)),
		etl: 3, flip: 90, averages: 2, bandwidth: 200, acquired: len(t2.positions), writeAcq: true,
	}
	px := make([]uint16, t1.rows*t1.cols)
	for i := range t1.positions {
		uid := newUID(r)
		t1.render(nk, i, noise, px)
		files = append(files, File{Name: name(p1.number), Data: mrInstance(h, p1, &t1, i, i+1, uid, px)})
		uids = append(uids, uid)
	}

	// Axial T2: standard axial orientation (rows left-right, columns
	// anterior-posterior), 4 mm slices over the mid neck.
	ax := series{rows: 192, cols: 192, spacing: 0.8, thickness: 4, gap: 0.4,
		row: vec{1, 0, 0}, col: vec{0, 1, 0}, contrast: t2.contrast, snr: t2.snr, gain: t2.gain,
		bias: t2.bias, biasC: t2.biasC}
	ax.normal = ax.row.cross(ax.col)
	centre := nk.rot.apply(vec{0, -10, (nk.top[1] + nk.bot[4]) / 2}).add(nk.origin)
	nAx := 10
	for i := range nAx {
		c := centre.add(vec{0, 0, (float64(i) - float64(nAx-1)/2) * 4.4})
		ax.positions = append(ax.positions, c.sub(ax.row.scale(95.5*0.8)).sub(ax.col.scale(95.5*0.8)))
	}
	p2 := &protocol{
		seriesUID: newUID(r), number: t2p.number + 20,
		description: []string{"AX T2 TSE", "t2_tse_tra", "Ax T2 FSE"}[r.IntN(3)],
		seqName:     "tse2d1", tr: math.Round(u(3000, 5000)), te: math.Round(u(90, 110)),
		etl: 15, flip: 150, averages: 2, bandwidth: 200, acquired: nAx, writeAcq: true,
	}
	px = make([]uint16, ax.rows*ax.cols)
	for i := range nAx {
		uid := newUID(r)
		ax.render(nk, i, noise, px)
		files = append(files, File{Name: name(p2.number), Data: mrInstance(h, p2, &ax, i, i+1, uid, px)})
		uids = append(uids, uid)
	}
	return files, uids
}

// Write generates studies 0 to n-1 of cfg's family under dir, one folder
// per study (study0000, ...), and their truth as dir/truth.json.
func Write(dir string, cfg Config, n int) ([]Truth, error) {
	var all []Truth
	for i := range n {
		files, t, err := Study(cfg, i)
		if err != nil {
			return nil, err
		}
		base := filepath.Join(dir, fmt.Sprintf("study%04d", i))
		for _, f := range files {
			p := filepath.Join(base, filepath.FromSlash(f.Name))
			if err := os.MkdirAll(filepath.Dir(p), 0o755); err != nil {
				return nil, fmt.Errorf("crossphantom: study %d: %w", i, err)
			}
			if err := atomicfile.WriteFile(p, f.Data); err != nil {
				return nil, fmt.Errorf("crossphantom: study %d: %w", i, err)
			}
		}
		all = append(all, t)
	}
	b, err := json.MarshalIndent(all, "", " ")
	if err != nil {
		return nil, fmt.Errorf("crossphantom: truth: %w", err)
	}
	if err := atomicfile.WriteFile(filepath.Join(dir, "truth.json"), b); err != nil {
		return nil, fmt.Errorf("crossphantom: truth: %w", err)
	}
	return all, nil
}
