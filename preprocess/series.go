package preprocess

import (
	"fmt"
	"math"
	"regexp"
	"sort"
	"strings"

	"github.com/midsag/midsag"
)

// Series-picking thresholds.
const (
	// SagittalMaxAngleDeg: a series is sagittal when its slice normal lies
	// within this angle of the patient's left-right axis. The usual
	// convention labels a plane by the normal's largest component (up to
	// 54.7 degrees off axis; common practice); midsag is stricter so that
	// oblique reformats are not taken for the target.
	SagittalMaxAngleDeg = 30.0
	// T2MinTE (ms): an echo time this long is what makes a spin-echo or
	// turbo spin echo image T2-weighted; TR only has to be long enough
	// for longitudinal recovery (common practice for 1.5 T and 3 T;
	// textbook ranges vary by a few tens of ms). T2MinTR is the usual TR
	// of a 2D T2 series; T2LowTR is the shortest TR that still counts as
	// T2-weighted with a long TE in 2D, scored lower (from memory: 2D TSE
	// T2 at 3 T is run with TR down to about 1500 ms). T2Min3DTR is the
	// shortest TR of a 3D variable-flip-angle turbo spin echo T2 series
	// (SPACE, CUBE, VISTA-like: TR 1000 to 2000 ms with TE 100 to 150 ms
	// is common practice; the long echo train, not the TR, sets the
	// contrast). T1MaxTR and T1MaxTE mark T1 weighting (common practice).
	T2MinTR   = 2000.0
	T2LowTR   = 1000.0
	T2Min3DTR = 500.0
	T2MinTE   = 80.0
	T1MaxTR   = 1000.0
	T1MaxTE   = 30.0
	// IntermediateMinTE (ms): images with a TR of at least T2LowTR (2D) or
	// T2Min3DTR (3D) and a TE between this and T2MinTE are intermediate
	// weighted, still CSF-bright (common practice).
	IntermediateMinTE = 60.0
	// STIRMaxTI (ms): inversion recovery with a TI below this nulls fat
	// (STIR; about 150 ms at 1.5 T, from memory); longer TIs null fluid
	// (FLAIR).
	STIRMaxTI = 300.0
)

var (
	descT2    = regexp.MustCompile(`(?i)(^|[^a-z0-9])t2`)
	descT1    = regexp.MustCompile(`(?i)(^|[^a-z0-9])t1`)
	descSTIR  = regexp.MustCompile(`(?i)stir|tirm|(^|[^a-z])ir([^a-z]|$)`)
	descSag   = regexp.MustCompile(`(?i)sag`)
	descOther = regexp.MustCompile(`(?i)(^|[^a-z])(ax|axial|tra|cor|coronal)([^a-z]|$)`)
	descLoc   = regexp.MustCompile(`(?i)loc|scout|survey|plan`)
	// descDiffusion and descEPI read series descriptions; vendors name
	// diffusion and echo-planar series this way (common practice).
	descDiffusion = regexp.MustCompile(`(?i)(^|[^a-z])(dwi|dti|diff|diffusion|tensor|adc|trace|resolve)`)
	descEPI       = regexp.MustCompile(`(?i)(^|[^a-z])(epi|ep2d|bold|fmri)`)
	descFieldMap  = regexp.MustCompile(`(?i)field[ _]?map|fmap|(^|[^a-z0-9])b0([^a-z0-9]|$)`)
	// seqEPI reads Sequence Name (0018,0024) and Pulse Sequence Name
	// (0018,9005): Siemens names echo-planar sequences "*epfid2d1_64",
	// "*ep_b1000", "ep2d_diff", Toshiba "SEEPI2D", GE "epi2" (from memory;
	// the Siemens and Toshiba names are in the real files under
	// testdata/realdata).
	seqEPI = regexp.MustCompile(`(?i)^\*?ep|epi|ep2d`)
)

// Image Type (0008,0008) values that exclude a series. PS3.3 C.8.13.1.1.1
// lists DIFFUSION, ADC, TRACE, FA, EADC and the complex components PHASE,
// REAL and IMAGINARY for Enhanced MR; single-frame scanners put the same
// words (Siemens: DIFFUSION, ADC, TRACEW, FA and P for phase, from memory)
// in value 3 and beyond.
var (
	imageTypeDiffusion  = []string{"DIFFUSION", "ADC", "EADC", "TRACE", "TRACEW", "FA", "ISOTROPIC", "DWI"}
	imageTypeFieldMap   = []string{"FIELD_MAP", "FIELDMAP", "B0 MAP", "B0MAP", "B0", "FM", "P", "PHASE", "PHASE MAP", "REAL", "IMAGINARY", "VELOCITY"}
	imageTypeReformat   = []string{"MPR", "CSA MPR", "CSAPARALLEL", "CSA RESAMPLED", "REFORMATTED", "RESAMPLED", "PROJECTION IMAGE", "MIP", "MINIP", "MNIP", "CSA MIP", "SUBTRACTION", "MOSAIC", "CURVED", "MAX_IP", "MIN_IP", "T1_MAP", "T2_MAP"}
	compressionWords    = regexp.MustCompile(`(?i)compress|jpeg|j2k|lossless|lossy|reversible|irreversible`)
	lossyTransferSyntax = map[string]string{
		// PS3.5 A.4: processes that discard information. JPEG-LS and JPEG
		// 2000 may also be lossless; those count as lossy unless Lossy
		// Image Compression (0028,2110) says 00.
		"1.2.840.10008.1.2.4.50": "JPEG baseline",
		"1.2.840.10008.1.2.4.51": "JPEG extended",
		"1.2.840.10008.1.2.4.81": "JPEG-LS near-lossless",
		"1.2.840.10008.1.2.4.91": "JPEG 2000",
	}
)

// candidate is a series with its score while picking.
type candidate struct {
	series   *midsag.Series
	score    float64
	eligible bool
	// fewSlices marks a sagittal T2 series that only lacks slices, so the
	// refusal can say too_few_slices rather than no_sagittal_t2_series.
	fewSlices bool
	stir      bool
	// lossy marks a series whose pixels went through lossy compression.
	lossy   bool
	reasons []string
}

func (c *candidate) add(points float64, format string, args ...any) {
	c.score += points
	c.reasons = append(c.reasons, fmt.Sprintf("%s (%+.2f)", fmt.Sprintf(format, args...), points))
}

func (c *candidate) exclude(format string, args ...any) {
	c.eligible = false
	c.reasons = append(c.reasons, "excluded: "+fmt.Sprintf(format, args...))
}

// PickSeries scores every series of a study as the T2-weighted sagittal
// target and returns the best eligible one with every candidate's score and
// reasons. minSlices is the number of slices the model's stack needs.
func PickSeries(st *midsag.Study, minSlices int) (*midsag.Series, []midsag.SeriesCandidate, []string, error) {
	cands := make([]*candidate, 0, len(st.Series))
	for _, se := range st.Series {
		cands = append(cands, scoreSeries(se, minSlices))
	}
	// A STIR series is the target only when no T2 series is eligible.
	hasT2 := false
	for _, c := range cands {
		if c.eligible && !c.stir {
			hasT2 = true
		}
	}
	if hasT2 {
		for _, c := range cands {
			if c.eligible && c.stir {
				c.exclude("STIR, and a T2-weighted sagittal series exists")
			}
		}
	}
	var best *candidate
	for _, c := range cands {
		if !c.eligible {
			continue
		}
		if best == nil || c.score > best.score ||
			(c.score == best.score && len(c.series.Instances) > len(best.series.Instances)) {
			best = c
		}
	}
	out := make([]midsag.SeriesCandidate, 0, len(cands))
	for _, c := range cands {
		score := c.score
		out = append(out, midsag.SeriesCandidate{
			SeriesInstanceUID: c.series.SeriesInstanceUID,
			SeriesNumber:      c.series.SeriesNumber,
			Description:       c.series.Description,
			Instances:         len(c.series.Instances),
			Score:             round2(score),
			Picked:            c == best,
			Reasons:           c.reasons,
		})
	}
	sort.SliceStable(out, func(i, j int) bool { return out[i].Score > out[j].Score })
	if best == nil {
		for _, c := range cands {
			if c.fewSlices {
				e := midsag.Rejectf(midsag.ReasonTooFewSlices,
					"series %q (%s) is sagittal T2 but has %d slices; the model needs at least %d",
					c.series.Description, c.series.SeriesInstanceUID, len(c.series.Instances), minSlices)
				e.Candidates = out
				return nil, out, nil, e
			}
		}
		e := midsag.Rejectf(midsag.ReasonNoSagittalT2,
			"none of the %d series is a T2-weighted sagittal MR series (each series' score and reasons are listed)", len(cands))
		e.Candidates = out
		return nil, out, nil, e
	}
	var flags []string
	if best.stir {
		flags = append(flags, "series_is_stir")
	}
	if best.score < 6 {
		flags = append(flags, "series_pick_weak")
	}
	if best.lossy {
		flags = append(flags, "lossy_compressed")
	}
	return best.series, out, flags, nil
}

func scoreSeries(se *midsag.Series, minSlices int) *candidate {
	c := &candidate{series: se, eligible: true}
	first, images := c.majorityOrientation(se)
	if first == nil {
		c.exclude("no image pixels")
		return c
	}
	if first.Modality != "" && first.Modality != "MR" {
		c.exclude("modality %s, not MR", first.Modality)
	}
	c.judgeDerivation(first)
	c.judgeContrast(se)
	if first.NumberOfFrames > 1 && !midsag.FramesAsSlices(first.SOPClassUID) {
		c.exclude("multi-frame instances (%d frames) of SOP Class %s are not read as slices; only Enhanced MR and Legacy Converted Enhanced MR frames are", first.NumberOfFrames, first.SOPClassUID)
	}
	c.judgePlane(first)
	c.judgeInversion(first)
	t2ish := c.judgeWeighting(se, first)
	if hasAny(first.SequenceVariant, "MP") {
		c.add(-1, "magnetization-prepared sequence (Sequence Variant MP)")
	}
	if !t2ish && !c.stir {
		c.exclude("not T2-weighted")
	}
	c.judgeCoverage(first, images, minSlices)
	c.judgeDescription(se.Description)
	return c
}

// majorityOrientation returns an image of the series' most common
// orientation and the number of images with pixels. The series is judged
// by that orientation, so one stray slice does not hide a sagittal
// series; SortSlices refuses the mix.
func (c *candidate) majorityOrientation(se *midsag.Series) (*midsag.Instance, int) {
	images := 0
	votes := map[[3]int]int{}
	var first *midsag.Instance
	best := 0
	for _, in := range se.Instances {
		if in.Rows <= 0 || in.Columns <= 0 {
			continue
		}
		images++
		n := Normal(in)
		key := [3]int{int(math.Round(n[0] * 10)), int(math.Round(n[1] * 10)), int(math.Round(n[2] * 10))}
		votes[key]++
		if votes[key] > best {
			best, first = votes[key], in
		}
	}
	if first != nil && best < images {
		c.reasons = append(c.reasons, fmt.Sprintf("%d of %d slices have another orientation", images-best, images))
	}
	return first, images
}

// judgePlane scores how close the slice normal is to the left-right axis.
func (c *candidate) judgePlane(first *midsag.Instance) {
	if !first.HasGeometry {
		c.exclude("no Image Orientation/Position (Patient)")
		return
	}
	ang := angleToAxisDeg(Normal(first), 0)
	if ang <= SagittalMaxAngleDeg {
		c.add(4, "sagittal: slice normal %.1f deg from the left-right axis", ang)
	} else {
		c.exclude("not sagittal: slice normal %.1f deg from the left-right axis (limit %.0f)", ang, SagittalMaxAngleDeg)
	}
}

// judgeInversion marks short-TI inversion recovery as STIR and excludes
// long-TI (fluid-nulled) inversion recovery.
func (c *candidate) judgeInversion(first *midsag.Instance) {
	ti := first.InversionTime
	ir := ti > 0 || hasAny(first.ScanningSequence, "IR")
	switch {
	case ir && (ti == 0 || ti < STIRMaxTI):
		c.stir = true
		c.add(-3, "inversion recovery with short TI %.0f ms: STIR (fat-nulled)", ti)
	case ir:
		c.exclude("inversion recovery with TI %.0f ms: fluid-nulled (FLAIR-like)", ti)
	}
}

// judgeCoverage excludes a series with fewer slices than the stack needs
// and favours one that covers the spine from side to side.
func (c *candidate) judgeCoverage(first *midsag.Instance, images, minSlices int) {
	if images < minSlices || images < 3 {
		if c.eligible {
			c.fewSlices = true
		}
		c.exclude("%d slices, fewer than the %d the stack needs", images, max(minSlices, 3))
		return
	}
	if images >= 9 {
		c.add(1, "%d slices", images)
	}
	if cover := float64(images) * first.SliceThickness; cover >= 30 {
		c.add(0.5, "covers about %.0f mm left to right", cover)
	}
}

// descRule is one reading of a Series Description: the pattern, the
// score it adds and what it suggests.
type descRule struct {
	re       *regexp.Regexp
	score    float64
	suggests string
}

// descContrast and descPlane are read in order; the first match of each
// counts.
var (
	descContrast = []descRule{{descSTIR, -0.5, "STIR"}, {descT2, 0.5, "T2"}, {descT1, -0.5, "T1"}}
	descPlane    = []descRule{{descLoc, -0.5, "a localizer"}, {descSag, 0.25, "sagittal"}, {descOther, -0.25, "another plane"}}
)

// judgeDescription nudges the score by what the Series Description
// suggests about contrast and plane; the header attributes lead.
func (c *candidate) judgeDescription(d string) {
	if d == "" {
		return
	}
	for _, rules := range [][]descRule{descContrast, descPlane} {
		for _, r := range rules {
			if r.re.MatchString(d) {
				c.add(r.score, "description %q suggests "+r.suggests, d)
				break
			}
		}
	}
}

// judgeWeighting scores the contrast from TE first, then TR (PS3.3
// C.8.3.1: Repetition Time (0018,0080), Echo Time (0018,0081)), and
// reports whether the series counts as T2-weighted.
func (c *candidate) judgeWeighting(se *midsag.Series, in *midsag.Instance) bool {
	tr, te := in.RepetitionTime, in.EchoTime
	is3D := in.MRAcquisitionType == "3D"
	minTR := T2LowTR
	if is3D {
		minTR = T2Min3DTR
	}
	switch {
	case te == 0:
		c.add(0, "weighting unknown: no Echo Time (TR %.0f ms)", tr)
		return descT2.MatchString(se.Description)
	case te >= T2MinTE && tr == 0:
		c.add(3, "T2-weighted by TE %.0f ms >= %.0f (no Repetition Time)", te, T2MinTE)
		return true
	case te >= T2MinTE && is3D && tr >= T2Min3DTR:
		c.add(4, "T2-weighted: 3D acquisition, TE %.0f ms >= %.0f, TR %.0f ms >= %.0f (variable flip angle TSE)", te, T2MinTE, tr, T2Min3DTR)
		return true
	case te >= T2MinTE && tr >= T2MinTR:
		c.add(4, "T2-weighted: TE %.0f ms >= %.0f and TR %.0f ms >= %.0f", te, T2MinTE, tr, T2MinTR)
		return true
	case te >= T2MinTE && tr >= T2LowTR:
		c.add(3, "T2-weighted by TE %.0f ms >= %.0f; TR %.0f ms is short for 2D but >= %.0f", te, T2MinTE, tr, T2LowTR)
		return true
	case te >= T2MinTE:
		c.add(1, "long TE %.0f ms with short TR %.0f ms: T2-weighted by TE, with some T1 weighting", te, tr)
		return true
	case te >= IntermediateMinTE && (tr == 0 || tr >= minTR):
		c.add(2, "intermediate/T2-weighted: TE %.0f ms, TR %.0f ms", te, tr)
		return true
	case te <= T1MaxTE && tr > 0 && tr <= T1MaxTR:
		c.add(-4, "T1-weighted: TR %.0f ms <= %.0f and TE %.0f ms <= %.0f", tr, T1MaxTR, te, T1MaxTE)
	case te <= T1MaxTE && tr >= T2MinTR:
		c.add(-2, "proton density weighted: TR %.0f ms, short TE %.0f ms <= %.0f", tr, te, T1MaxTE)
	default:
		c.add(-2, "neither T2- nor T1-weighted: TR %.0f ms, TE %.0f ms", tr, te)
	}
	return false
}

// judgeDerivation excludes localizers and derived images, except those
// whose only derivation is compression, and notes lossy compression.
// PS3.3 C.7.6.1.1.2: value 1 of Image Type is ORIGINAL or DERIVED;
// C.7.6.1.1.5: Lossy Image Compression (0028,2110) 01 means the image has
// been lossy compressed at some point, and an encoder that compresses
// lossily marks the result DERIVED (C.7.6.1.1.3, Derivation Description;
// CID 7203 code 113040 "Lossy Compression", as in pydicom-data's
// MR2_J2KI.dcm).
func (c *candidate) judgeDerivation(in *midsag.Instance) {
	if hasAny(in.ImageType, "LOCALIZER") {
		c.exclude("Image Type says LOCALIZER")
	}
	lossyFlag := in.LossyImageCompression == "01"
	tsName, lossyTS := lossyTransferSyntax[in.TransferSyntaxUID]
	lossyTS = lossyTS && (in.LossyImageCompression != "00" || tsName == "JPEG baseline" || tsName == "JPEG extended")
	if len(in.ImageType) > 0 && strings.EqualFold(strings.TrimSpace(in.ImageType[0]), "DERIVED") {
		if kw := firstOf(in.ImageType, imageTypeReformat); kw != "" {
			c.exclude("Image Type DERIVED with %s: a reformat or projection, not an acquired slice", kw)
		} else if compressionOnly(in) {
			c.reasons = append(c.reasons, "Image Type DERIVED only by compression (Lossy Image Compression "+
				orNone(in.LossyImageCompression)+", Derivation Description "+fmt.Sprintf("%q", in.DerivationDescription)+"): accepted as acquired")
		} else {
			c.exclude("Image Type says DERIVED (a reformat or computed image) and nothing says compression was the only derivation")
		}
	}
	switch {
	case lossyFlag:
		c.lossy = true
		c.reasons = append(c.reasons, "lossy compressed (Lossy Image Compression 01)")
	case lossyTS:
		c.lossy = true
		c.reasons = append(c.reasons, "lossy compressed ("+tsName+" transfer syntax)")
	}
}

// compressionOnly reports whether a DERIVED image says its derivation was
// compression: Lossy Image Compression 01, the Lossy Compression code, or
// a Derivation Description about compression.
func compressionOnly(in *midsag.Instance) bool {
	if in.LossyImageCompression == "01" {
		return true
	}
	for _, code := range in.DerivationCodes {
		if code == "DCM:113040" {
			return true
		}
	}
	return in.DerivationDescription != "" && compressionWords.MatchString(in.DerivationDescription)
}

// judgeContrast excludes diffusion, echo-planar, gradient-echo and
// field-map series. Every instance is looked at, since a diffusion series
// mixes b = 0 and b > 0 images.
func (c *candidate) judgeContrast(se *midsag.Series) {
	seen := map[string]bool{}
	once := func(key, format string, args ...any) {
		if !seen[key] {
			seen[key] = true
			c.exclude(format, args...)
		}
	}
	for _, in := range se.Instances {
		// PS3.3 C.8.13.1.1.1 and vendor practice: Image Type names the
		// diffusion images and maps; a b = 0 image of such a series is
		// still part of a diffusion acquisition.
		if kw := firstOf(in.ImageType, imageTypeDiffusion); kw != "" {
			once("diffusion", "diffusion: Image Type says %s", kw)
		}
		// PS3.3 C.8.13.5.9: Diffusion b-value (0018,9087) in s/mm2.
		if in.HasDiffusionBValue && in.DiffusionBValue > 0 {
			once("diffusion", "diffusion: Diffusion b-value %.0f s/mm2", in.DiffusionBValue)
		}
		if kw := firstOf(in.ImageType, imageTypeFieldMap); kw != "" {
			once("fieldmap", "field map or phase image: Image Type says %s", kw)
		}
		// PS3.3 C.8.3.1: Scanning Sequence (0018,0020) EP is echo planar;
		// C.8.13.5.1: Echo Planar Pulse Sequence (0018,9018) YES.
		switch {
		case hasAny(in.ScanningSequence, "EP"):
			once("epi", "echo-planar: Scanning Sequence %s", strings.Join(in.ScanningSequence, "\\"))
		case in.EchoPlanarPulseSequence == "YES":
			once("epi", "echo-planar: Echo Planar Pulse Sequence YES")
		case seqEPI.MatchString(in.SequenceName):
			once("epi", "echo-planar: Sequence Name %q", in.SequenceName)
		case seqEPI.MatchString(in.PulseSequenceName):
			once("epi", "echo-planar: Pulse Sequence Name %q", in.PulseSequenceName)
		}
		// PS3.3 C.8.3.1: GR without SE is a gradient echo, T2*- rather
		// than T2-weighted; C.8.13.5.1: Echo Pulse Sequence GRADIENT.
		switch {
		case in.EchoPulseSequence == "GRADIENT":
			once("gre", "gradient echo (Echo Pulse Sequence GRADIENT): T2*-weighted, not T2")
		case hasAny(in.ScanningSequence, "GR") && !hasAny(in.ScanningSequence, "SE"):
			once("gre", "gradient echo (Scanning Sequence %s without SE): T2*-weighted, not T2", strings.Join(in.ScanningSequence, "\\"))
		}
	}
	d := se.Description
	if descDiffusion.MatchString(d) {
		once("diffusion", "diffusion: description %q", d)
	}
	if descEPI.MatchString(d) {
		once("epi", "echo-planar: description %q", d)
	}
	if descFieldMap.MatchString(d) {
		once("fieldmap", "field map: description %q", d)
	}
}

// firstOf returns the first of vals (trimmed, case-insensitive) that is in
// want, or "".
func firstOf(vals, want []string) string {
	for _, v := range vals {
		v = strings.ToUpper(strings.TrimSpace(v))
		for _, w := range want {
			if v == w {
				return v
			}
		}
	}
	return ""
}

func orNone(s string) string {
	if s == "" {
		return "absent"
	}
	return s
}

func hasAny(vals []string, want string) bool {
	for _, v := range vals {
		if strings.EqualFold(strings.TrimSpace(v), want) {
			return true
		}
	}
	return false
}
