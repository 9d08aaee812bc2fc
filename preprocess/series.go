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
	// T2MinTR and T2MinTE (ms): long TR and long TE make a spin-echo image
	// T2-weighted; T1MaxTR and T1MaxTE mark T1 weighting (common practice
	// for 1.5 T and 3 T; textbook ranges vary by a few tens of ms).
	T2MinTR = 2000.0
	T2MinTE = 80.0
	T1MaxTR = 1000.0
	T1MaxTE = 30.0
	// IntermediateMinTE (ms): long-TR images with TE between this and
	// T2MinTE are intermediate weighted, still CSF-bright (common practice).
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
	reasons   []string
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
	return best.series, out, flags, nil
}

func scoreSeries(se *midsag.Series, minSlices int) *candidate {
	c := &candidate{series: se, eligible: true}
	images := 0
	// The series is judged by its most common orientation, so one stray
	// slice does not hide a sagittal series; SortSlices refuses the mix.
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
	if first == nil {
		c.exclude("no image pixels")
		return c
	}
	if best < images {
		c.reasons = append(c.reasons, fmt.Sprintf("%d of %d slices have another orientation", images-best, images))
	}
	if first.Modality != "" && first.Modality != "MR" {
		c.exclude("modality %s, not MR", first.Modality)
	}
	for _, t := range first.ImageType {
		switch strings.ToUpper(t) {
		case "LOCALIZER":
			c.exclude("Image Type says LOCALIZER")
		case "DERIVED":
			c.exclude("Image Type says DERIVED (a reformat or computed image)")
		}
	}
	if first.NumberOfFrames > 1 && !midsag.FramesAsSlices(first.SOPClassUID) {
		c.exclude("multi-frame instances (%d frames) of SOP Class %s are not read as slices; only Enhanced MR and Legacy Converted Enhanced MR frames are", first.NumberOfFrames, first.SOPClassUID)
	}
	if !first.HasGeometry {
		c.exclude("no Image Orientation/Position (Patient)")
	} else {
		n := Normal(first)
		ang := angleToAxisDeg(n, 0)
		if ang <= SagittalMaxAngleDeg {
			c.add(4, "sagittal: slice normal %.1f deg from the left-right axis", ang)
		} else {
			c.exclude("not sagittal: slice normal %.1f deg from the left-right axis (limit %.0f)", ang, SagittalMaxAngleDeg)
		}
	}
	tr, te, ti := first.RepetitionTime, first.EchoTime, first.InversionTime
	ir := ti > 0 || hasAny(first.ScanningSequence, "IR")
	switch {
	case ir && (ti == 0 || ti < STIRMaxTI):
		c.stir = true
		c.add(-3, "inversion recovery with short TI %.0f ms: STIR (fat-nulled)", ti)
	case ir:
		c.exclude("inversion recovery with TI %.0f ms: fluid-nulled (FLAIR-like)", ti)
	}
	t2ish := false
	switch {
	case tr == 0 || te == 0:
		c.add(0, "weighting unknown: TR %.0f ms, TE %.0f ms", tr, te)
		if descT2.MatchString(se.Description) {
			t2ish = true
		}
	case tr >= T2MinTR && te >= T2MinTE:
		t2ish = true
		c.add(4, "T2-weighted: TR %.0f ms >= %.0f and TE %.0f ms >= %.0f", tr, T2MinTR, te, T2MinTE)
	case tr >= T2MinTR && te >= IntermediateMinTE:
		t2ish = true
		c.add(2, "intermediate/T2-weighted: TR %.0f ms, TE %.0f ms", tr, te)
	case tr <= T1MaxTR && te <= T1MaxTE:
		c.add(-4, "T1-weighted: TR %.0f ms <= %.0f and TE %.0f ms <= %.0f", tr, T1MaxTR, te, T1MaxTE)
	default:
		c.add(-2, "neither T2- nor T1-weighted: TR %.0f ms, TE %.0f ms", tr, te)
	}
	if hasAny(first.SequenceVariant, "MP") {
		c.add(-1, "magnetization-prepared sequence (Sequence Variant MP)")
	}
	if !t2ish && !c.stir {
		c.exclude("not T2-weighted")
	}
	if images < minSlices || images < 3 {
		if c.eligible {
			c.fewSlices = true
		}
		c.exclude("%d slices, fewer than the %d the stack needs", images, max(minSlices, 3))
	} else {
		if images >= 9 {
			c.add(1, "%d slices", images)
		}
		cover := float64(images) * first.SliceThickness
		if cover >= 30 {
			c.add(0.5, "covers about %.0f mm left to right", cover)
		}
	}
	d := se.Description
	switch {
	case d == "":
	case descSTIR.MatchString(d):
		c.add(-0.5, "description %q suggests STIR", d)
	case descT2.MatchString(d):
		c.add(0.5, "description %q suggests T2", d)
	case descT1.MatchString(d):
		c.add(-0.5, "description %q suggests T1", d)
	}
	switch {
	case d == "":
	case descLoc.MatchString(d):
		c.add(-0.5, "description %q suggests a localizer", d)
	case descSag.MatchString(d):
		c.add(0.25, "description %q suggests sagittal", d)
	case descOther.MatchString(d):
		c.add(-0.25, "description %q suggests another plane", d)
	}
	return c
}

func hasAny(vals []string, want string) bool {
	for _, v := range vals {
		if strings.EqualFold(strings.TrimSpace(v), want) {
			return true
		}
	}
	return false
}
