package phantom

import (
	"bytes"
	"fmt"
	"math"
	"math/rand/v2"
	"slices"
	"strings"
	"time"

	"github.com/midsag/midsag"
)

// Manufacturer is written to Manufacturer (0008,0070) of every phantom
// instance: the fictional lab whose screening cohort the phantoms imitate.
const Manufacturer = "Northfield Spine Imaging Lab"

// Options controls a phantom cohort.
type Options struct {
	// Studies is the number of studies Generate writes.
	Studies int
	// Seed makes the cohort reproducible: a study depends only on Seed and
	// its index.
	Seed int64
	// Syntaxes lists the transfer syntax UIDs to draw from, one per study;
	// nil means every syntax in SupportedSyntaxes.
	Syntaxes []string
	// NoDecoys writes only the T2 sagittal target series (faster, for
	// tests and training).
	NoDecoys bool
	// CompressionRate is the probability that a study has cord
	// compression. Zero means the default 0.5; a negative value means no
	// study has compression; 1 means every study has it.
	CompressionRate float64
	// Matrix, when above zero, sets the matrix of every sagittal series
	// to Matrix x Matrix over the same field of view (benchmarks at the
	// size a group's model takes); zero draws it from matrixSizes.
	Matrix int
}

// File is one generated DICOM Part 10 file. Name is a relative path such
// as "study-0003/IM0012.dcm".
type File struct {
	Name string
	Data []byte
}

// StudyTruth is what a study contains, known exactly because the anatomy
// is analytic.
type StudyTruth struct {
	Study                string `json:"study"` // folder name under Generate's dir
	StudyInstanceUID     string `json:"study_instance_uid"`
	TargetSeriesUID      string `json:"target_series_uid"`
	CenterSOPInstanceUID string `json:"center_sop_instance_uid"`
	// CenterIndex is the index of the centre slice in the target series
	// sorted by position along its normal (row × column direction,
	// ascending): the slice whose plane is nearest CordPointMM.
	CenterIndex    int     `json:"center_index"`
	Slices         int     `json:"slices"`
	SliceSpacingMM float64 `json:"slice_spacing_mm"`
	// SlabOffsetSlices is the signed distance, in slice spacings along the
	// normal, from CordPointMM to the slab centre.
	SlabOffsetSlices float64 `json:"slab_offset_slices"`
	// MidlineXMM is the x (patient left) of the midsagittal plane at the
	// cord point.
	MidlineXMM float64 `json:"midline_x_mm"`
	// TiltDeg is the angle between the patient's midsagittal plane and the
	// scanner's sagittal plane; ResidualDeg that between the midsagittal
	// plane and the target slices.
	TiltDeg     float64 `json:"tilt_deg"`
	ResidualDeg float64 `json:"residual_deg"`
	// CordPointMM is the centre of the cord at the C4-C5 disc in patient
	// coordinates, and MidlineNormal the unit normal of the midsagittal
	// plane, which passes through it.
	CordPointMM   [3]float64 `json:"cord_point_mm"`
	MidlineNormal [3]float64 `json:"midline_normal"`
	Compression   bool       `json:"compression"`
	// Level is the compressed disc level, e.g. "C5-C6"; "" when none.
	Level             string `json:"level"`
	TransferSyntaxUID string `json:"transfer_syntax_uid"`
}

// SupportedSyntaxes returns the transfer syntax UIDs the phantom writer can
// produce.
func SupportedSyntaxes() []string {
	return append([]string{midsag.ExplicitVRLittleEndian, midsag.ImplicitVRLittleEndian, midsag.ExplicitVRBigEndian, midsag.DeflatedExplicitVRLittleEndian}, encapsulatedSyntaxes()...)
}

func (o Options) syntaxes() ([]string, error) {
	if len(o.Syntaxes) == 0 {
		return SupportedSyntaxes(), nil
	}
	sup := SupportedSyntaxes()
	for _, s := range o.Syntaxes {
		if !slices.Contains(sup, s) {
			return nil, fmt.Errorf("transfer syntax %q is not supported (supported: %s)", s, strings.Join(sup, ", "))
		}
	}
	return o.Syntaxes, nil
}

func (o Options) compressionRate() (float64, error) {
	switch {
	case o.CompressionRate > 1 || math.IsNaN(o.CompressionRate):
		return 0, fmt.Errorf("compression rate %v is above 1", o.CompressionRate)
	case o.CompressionRate < 0:
		return 0, nil
	case o.CompressionRate == 0:
		return 0.5, nil
	}
	return o.CompressionRate, nil
}

// seriesKind is the role of a series in a study.
type seriesKind int

const (
	kindT2Sag seriesKind = iota
	kindT1Sag
	kindSTIRSag
	kindT2Ax
	kindLocalizer
)

// descriptions are free-text Series Descriptions per kind, some empty and
// one misleading ("SAG T2 FS" for a STIR).
var descriptions = map[seriesKind][]string{
	kindT2Sag:     {"SAG T2 TSE", "t2_tse_sag_320", "Sag T2", "", "T2 SAG FSE", "C-SPINE SAG T2", "sag t2 hr"},
	kindT1Sag:     {"SAG T1 TSE", "t1_tse_sag", "Sag T1", "", "T1 SAG FSE"},
	kindSTIRSag:   {"SAG STIR", "t2_tirm_sag", "Sag STIR", "SAG T2 FS", ""},
	kindT2Ax:      {"AX T2", "t2_tse_tra", "Axial T2 discs", "", "T2 AX C3-C7"},
	kindLocalizer: {"3-plane loc", "localizer", "SURVEY", ""},
}

// series is one planned series: acquisition attributes and its frames.
type series struct {
	kind                   seriesKind
	uid, desc              string
	number                 int
	contrast               contrast
	tr, te, ti, flip       float64
	etl                    int
	scanSeq, variant, opts string
	seqName, imageType     string
	spacingBetween         float64
	frames                 []frame
	instance               []int // Instance Number of each frame
}

// study holds the per-study draws shared by its series.
type study struct {
	opts      Options
	index     int
	r         *rand.Rand
	neck      *neck
	pose      pose
	ts        string
	bitsStore int
	date      time.Time
	studyUID  string
	forUID    string
	field     float64
}

func uniform(r *rand.Rand, a, b float64) float64 { return a + (b-a)*r.Float64() }

func pick[T any](r *rand.Rand, xs []T) T { return xs[r.IntN(len(xs))] }

// matrixSizes are the acquisition matrices drawn from (common practice).
var matrixSizes = []int{192, 224, 256, 320, 384}

// sagittal plans a sagittal stack. The slab follows the patient's tilt
// plus an independent scanner angulation of at most 4°, and is placed so
// that slice centre lies within 0.3 spacings of the cord point: the
// midline slice is then well defined even though the slab centre is off
// the midline by a non-integer number of spacings.
func (s *study) sagittal(sr *series, nSlices int, thick, gap float64) (center int, jitter float64) {
	r := s.r
	rows := pick(r, matrixSizes)
	fov := uniform(r, 190, 240)
	sp := round(math.Min(1.0, math.Max(0.5, fov/float64(rows))), 4)
	var colChoices []int
	for _, c := range matrixSizes {
		if float64(c)*sp >= 150 && c <= rows {
			colChoices = append(colChoices, c)
		}
	}
	cols := rows
	if len(colChoices) > 0 {
		cols = pick(r, colChoices)
	}
	if m := s.opts.Matrix; m > 0 {
		rows, cols, sp = m, m, round(fov/float64(m), 4)
	}
	mag, phi := deg(uniform(r, 0, 4)), uniform(r, 0, 2*math.Pi)
	m := s.pose.rot.mul(rotZ(mag * math.Cos(phi))).mul(rotY(mag * math.Sin(phi)))
	// Rows run anterior to posterior and columns head to foot (PS3.3
	// C.7.6.2.1.1), the usual sagittal display.
	row, col := m.apply(vec{0, 1, 0}), m.apply(vec{0, 0, -1})
	for i := range row {
		row[i], col[i] = round(row[i], 6), round(col[i], 6)
	}
	f := frame{row: row, col: col, rows: rows, cols: cols, spacing: sp, thick: thick}
	nrm := f.normal()
	d := thick + gap
	mid := float64(nSlices-1) / 2
	lo, hi := int(math.Ceil(mid-2.7)), int(math.Floor(mid+2.7))
	center = lo + r.IntN(hi-lo+1)
	jitter = uniform(r, -0.3, 0.3)
	c := s.pose.origin
	in := c.add(vec{0, uniform(r, 0, 15), uniform(r, -15, 0)})
	for i := 0; i < nSlices; i++ {
		target := nrm.dot(c) + (float64(i-center)-jitter)*d
		q := in.add(nrm.scale(target - nrm.dot(in)))
		ipp := q.sub(row.scale(sp * float64(cols-1) / 2)).sub(col.scale(sp * float64(rows-1) / 2))
		for k := range ipp {
			ipp[k] = round(ipp[k], 4)
		}
		fi := f
		fi.ipp = ipp
		sr.frames = append(sr.frames, fi)
	}
	sr.spacingBetween = d
	return center, jitter
}

// axial plans a few axial slices through the C3-C4 to C6-C7 discs, each
// angled to its disc.
func (s *study) axial(sr *series, thick float64) {
	r := s.r
	n := s.neck
	for k := 1; k <= 4; k++ {
		z := (2 - float64(k)) * n.period
		y := n.lord * z * z
		// Tangent of the lordotic curve at the disc: the disc plane tilts
		// with it.
		slope := math.Atan(2 * n.lord * z)
		m := s.pose.rot.mul(rotX(-slope))
		row, col := m.apply(vec{1, 0, 0}), m.apply(vec{0, 1, 0})
		for i := range row {
			row[i], col[i] = round(row[i], 6), round(col[i], 6)
		}
		centre := s.pose.origin.add(s.pose.rot.apply(vec{0, y + uniform(r, 0, 10), z}))
		const size, sp = 256, 0.625
		ipp := centre.sub(row.scale(sp * (size - 1) / 2)).sub(col.scale(sp * (size - 1) / 2))
		for i := range ipp {
			ipp[i] = round(ipp[i], 4)
		}
		sr.frames = append(sr.frames, frame{ipp: ipp, row: row, col: col, rows: size, cols: size, spacing: sp, thick: thick})
	}
}

// localizer plans three orthogonal scanner-plane images through the
// isocentre region: sagittal, coronal, axial.
func (s *study) localizer(sr *series) {
	const size, sp, thick = 256, 1.1, 8.0
	c := s.pose.origin
	for _, rc := range [][2]vec{
		{{0, 1, 0}, {0, 0, -1}},
		{{1, 0, 0}, {0, 0, -1}},
		{{1, 0, 0}, {0, 1, 0}},
	} {
		ipp := c.sub(rc[0].scale(sp * (size - 1) / 2)).sub(rc[1].scale(sp * (size - 1) / 2))
		for i := range ipp {
			ipp[i] = round(ipp[i], 4)
		}
		sr.frames = append(sr.frames, frame{ipp: ipp, row: rc[0], col: rc[1], rows: size, cols: size, spacing: sp, thick: thick})
	}
}

func rotX(a float64) mat {
	c, s := math.Cos(a), math.Sin(a)
	return mat{{1, 0, 0}, {0, c, -s}, {0, s, c}}
}

// GenerateStudy returns the files of study index of the cohort described by
// opts, and its truth. It is deterministic per (opts.Seed, index) and
// keeps everything in memory.
func GenerateStudy(opts Options, index int) ([]File, StudyTruth, error) {
	var truth StudyTruth
	if index < 0 {
		return nil, truth, fmt.Errorf("study index %d is negative", index)
	}
	syntaxes, err := opts.syntaxes()
	if err != nil {
		return nil, truth, err
	}
	rate, err := opts.compressionRate()
	if err != nil {
		return nil, truth, err
	}
	r := rngFor("study", opts.Seed, index)
	compress := r.Float64() < rate
	level := -1
	if compress {
		level = 1 + r.IntN(4) // C3-C4 to C6-C7
	}
	yaw, roll := deg(uniform(r, -6, 6)), deg(uniform(r, -6, 6))
	s := &study{
		opts:  opts,
		index: index,
		r:     r,
		neck:  newNeck(rngFor("neck", opts.Seed, index), level),
		// A separate stream, so restricting the syntaxes changes nothing
		// else about the study.
		ts:        pick(rngFor("syntax", opts.Seed, index), syntaxes),
		bitsStore: pick(r, []int{12, 16}),
		date:      time.Date(2019, 1, 1, 7, 0, 0, 0, time.UTC).Add(time.Duration(r.IntN(6*365*24*3600)) * time.Second),
		studyUID:  uidFrom("study", opts.Seed, index),
		forUID:    uidFrom("frame of reference", opts.Seed, index),
		field:     pick(r, []float64{1.5, 3}),
	}
	s.pose = pose{
		origin: vec{round(uniform(r, -10, 10), 3), uniform(r, -8, 8), uniform(r, -15, 5)},
		rot:    rotZ(yaw).mul(rotY(roll)),
	}

	target := &series{kind: kindT2Sag, contrast: contrastT2}
	nSlices := 11 + r.IntN(9)
	thick, gap := round(uniform(r, 3, 4), 2), round(uniform(r, 0, 0.5), 2)
	center, jitter := s.sagittal(target, nSlices, thick, gap)
	plan := []*series{target}
	if !opts.NoDecoys {
		t1 := &series{kind: kindT1Sag, contrast: contrastT1}
		s.sagittal(t1, 11+r.IntN(5), round(uniform(r, 3, 4), 2), round(uniform(r, 0, 0.6), 2))
		stir := &series{kind: kindSTIRSag, contrast: contrastSTIR}
		s.sagittal(stir, 11+r.IntN(5), round(uniform(r, 3, 4), 2), round(uniform(r, 0, 0.6), 2))
		ax := &series{kind: kindT2Ax, contrast: contrastT2}
		s.axial(ax, round(uniform(r, 3, 4), 2))
		loc := &series{kind: kindLocalizer, contrast: contrastGRE}
		s.localizer(loc)
		plan = append(plan, t1, stir, ax)
		r.Shuffle(len(plan), func(i, j int) { plan[i], plan[j] = plan[j], plan[i] })
		plan = append([]*series{loc}, plan...)
	}
	for i, sr := range plan {
		sr.number = i + 1
		sr.uid = uidFrom("series", opts.Seed, index, sr.number)
		sr.desc = pick(r, descriptions[sr.kind])
		s.acquisition(sr)
		// Instance numbers ascend along the normal or against it.
		up := r.IntN(2) == 0
		for k := range sr.frames {
			if up {
				sr.instance = append(sr.instance, k+1)
			} else {
				sr.instance = append(sr.instance, len(sr.frames)-k)
			}
		}
	}

	// Truth from the written geometry: the target slice whose plane is
	// nearest the cord point (PS3.3 C.7.6.2.1.1: a plane through IPP with
	// normal row × column).
	cord := s.pose.origin
	best, bestD := -1, math.Inf(1)
	for i, f := range target.frames {
		if d := math.Abs(f.normal().dot(cord.sub(f.ipp))); d < bestD {
			best, bestD = i, d
		}
	}
	if best != center {
		return nil, truth, fmt.Errorf("study %d: planned centre slice %d but geometry gives %d", index, center, best)
	}
	midNormal := s.pose.rot.apply(vec{1, 0, 0})
	truth = StudyTruth{
		Study:             studyDir(index),
		StudyInstanceUID:  s.studyUID,
		TargetSeriesUID:   target.uid,
		CenterIndex:       center,
		Slices:            nSlices,
		SliceSpacingMM:    thick + gap,
		SlabOffsetSlices:  float64(nSlices-1)/2 - float64(center) - jitter,
		MidlineXMM:        cord[0],
		TiltDeg:           angleDeg(midNormal, vec{1, 0, 0}),
		ResidualDeg:       angleDeg(midNormal, target.frames[0].normal()),
		CordPointMM:       cord,
		MidlineNormal:     midNormal,
		Compression:       compress,
		TransferSyntaxUID: s.ts,
	}
	if compress {
		truth.Level = discNames[level]
	}
	files, centerUID, err := s.write(plan, center)
	if err != nil {
		return nil, truth, fmt.Errorf("study %d: %w", index, err)
	}
	truth.CenterSOPInstanceUID = centerUID
	return files, truth, nil
}

// studyDir names a study's folder.
func studyDir(index int) string { return fmt.Sprintf("study-%04d", index) }

// acquisition draws the MR acquisition attributes of a series (PS3.3
// C.8.3.1); ranges are typical protocol values, "from memory".
func (s *study) acquisition(sr *series) {
	r := s.r
	sr.opts = pick(r, []string{"", "PFP", "FC", `PFP\FC`})
	sr.scanSeq, sr.variant = "SE", "SK"
	sr.imageType = pick(r, []string{`ORIGINAL\PRIMARY\M\ND`, `ORIGINAL\PRIMARY\M\NORM\DIS2D`, `ORIGINAL\PRIMARY\OTHER`})
	switch sr.kind {
	case kindT2Sag, kindT2Ax:
		sr.tr, sr.te, sr.etl = math.Round(uniform(r, 2500, 4000)), round(uniform(r, 90, 120), 1), 12+r.IntN(13)
		sr.seqName = "nsil_tse2d"
	case kindT1Sag:
		sr.tr, sr.te, sr.etl = math.Round(uniform(r, 400, 700)), round(uniform(r, 8, 15), 1), 2+r.IntN(3)
		sr.seqName = "nsil_tse2d"
	case kindSTIRSag:
		sr.tr, sr.te, sr.etl = math.Round(uniform(r, 3000, 5000)), round(uniform(r, 30, 70), 1), 8+r.IntN(9)
		sr.ti = math.Round(uniform(r, 130, 200))
		sr.scanSeq = pick(r, []string{"IR", `SE\IR`})
		sr.seqName = "nsil_tir2d"
	case kindLocalizer:
		sr.tr, sr.te, sr.etl = round(uniform(r, 7, 9), 2), round(uniform(r, 3, 4), 2), 1
		sr.flip = 20
		sr.scanSeq, sr.variant, sr.opts = "GR", "SP", ""
		sr.imageType = `ORIGINAL\PRIMARY\LOCALIZER`
		sr.seqName = "nsil_gre2d"
	}
	if sr.flip == 0 {
		sr.flip = 90
	}
}

// ReadAll reads every file with pre, in order, for tests and tools that
// hold a generated study in memory. The first refusal ends it, naming
// the file.
func ReadAll(pre midsag.Preprocessor, files []File) ([]*midsag.Instance, error) {
	out := make([]*midsag.Instance, 0, len(files))
	for _, f := range files {
		in, err := pre.Read(f.Name, bytes.NewReader(f.Data))
		if err != nil {
			return nil, fmt.Errorf("%s: %w", f.Name, err)
		}
		out = append(out, in)
	}
	return out, nil
}
