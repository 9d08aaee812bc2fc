package preprocess

import (
	"context"
	"fmt"
	"slices"
	"time"

	"github.com/midsag/midsag"
)

// Prepare groups the instances of one study, picks the T2-weighted
// sagittal series and its midline slices, and builds the model input as
// spec says. More than one study is refused: a result describes one study.
func (p *Preprocessor) Prepare(ctx context.Context, instances []*midsag.Instance, spec midsag.InputSpec) (*midsag.Prepared, error) {
	timings := map[string]float64{}
	t := time.Now()
	lap := func(name string) {
		timings[name] = float64(time.Since(t).Microseconds()) / 1000
		t = time.Now()
	}
	instances, err := Dedupe(instances)
	if err != nil {
		return nil, err
	}
	studies := Group(instances)
	switch {
	case len(studies) == 0:
		return nil, midsag.Rejectf(midsag.ReasonNoInput, "no DICOM instances")
	case len(studies) > 1:
		return nil, midsag.Rejectf(midsag.ReasonMultipleStudies, "the input holds %d studies; give one study at a time", len(studies))
	}
	st := studies[0]
	se, cands, flags, err := PickSeries(st, spec.Slices)
	if err != nil {
		return nil, err
	}
	lap("pick_series")
	if err := ctx.Err(); err != nil {
		return nil, err
	}
	sl, err := SortSlices(se)
	if err != nil {
		return nil, err
	}
	if err := PickSlices(sl); err != nil {
		return nil, fmt.Errorf("series %s: %w", se.SeriesInstanceUID, err)
	}
	for i, in := range sl.Instances {
		sl.Scores[i].FrameNumber = in.FrameNumber()
	}
	lap("pick_slices")
	tensor, sflags, err := Stack(sl, spec)
	if err != nil {
		return nil, err
	}
	lap("stack")
	idx, clamped := StackIndices(sl.Center, len(sl.Instances), spec)
	for _, i := range idx {
		sl.Scores[i].InStack = true
	}
	flags = append(flags, sflags...)
	flags = append(flags, sl.Flags...)
	for i := range cands {
		if cands[i].Picked {
			cands[i].Reasons = append(cands[i].Reasons, sl.Notes...)
		}
	}
	if comp := CheckCompleteness(sl); len(comp.Flags) > 0 {
		// A partial series is never scored as complete: the flag goes on
		// the result and the evidence into the picked series' reasons.
		flags = append(flags, comp.Flags...)
		for i := range cands {
			if cands[i].Picked {
				cands[i].Reasons = append(cands[i].Reasons, comp.Notes...)
			}
		}
	}
	if clamped && !slices.Contains(flags, FlagMidlineAtSlabEdge) {
		// The stack needs slices beyond the slab's edge.
		flags = append(flags, FlagMidlineAtSlabEdge)
	}
	return &midsag.Prepared{
		StudyInstanceUID:     st.StudyInstanceUID,
		SeriesInstanceUID:    se.SeriesInstanceUID,
		CenterSOPInstanceUID: sl.Instances[sl.Center].SOPInstanceUID,
		CenterFrameNumber:    sl.Instances[sl.Center].FrameNumber(),
		Candidates:           cands,
		Slices:               sl.Scores,
		MidlineConfidence:    sl.Confidence,
		Input:                tensor,
		QualityFlags:         flags,
		TimingsMS:            timings,
	}, nil
}

var _ midsag.Preprocessor = (*Preprocessor)(nil)
