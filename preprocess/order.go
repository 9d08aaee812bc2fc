package preprocess

import (
	"math"
	"sort"

	"github.com/midsag/midsag"
)

// Geometry tolerances for sorting a series into a slab.
const (
	// orientationTolerance is the smallest cosine between the direction
	// cosines of two slices of one series (about 2 degrees).
	orientationTolerance = 0.9994
	// spacingTolerance is the largest relative deviation of one gap
	// between slice positions from the series' median gap.
	spacingTolerance = 0.2
)

// SortSlices orders a series' image instances by position along the slice
// normal and checks that orientation, matrix and spacing are consistent.
func SortSlices(se *midsag.Series) (*Slices, error) {
	var ins []*midsag.Instance
	for _, in := range se.Instances {
		if in.Rows > 0 && in.Columns > 0 {
			ins = append(ins, in)
		}
	}
	if len(ins) == 0 {
		return nil, midsag.Rejectf(midsag.ReasonTooFewSlices, "series has no images")
	}
	ref := ins[0]
	if !ref.HasGeometry {
		return nil, midsag.Rejectf(midsag.ReasonInconsistentGeometry, "slice %s has no Image Orientation/Position (Patient)", ref.SOPInstanceUID)
	}
	r0, c0 := rowDir(ref), colDir(ref)
	if math.Abs(r0.dot(c0)) > 1e-3 {
		return nil, midsag.Rejectf(midsag.ReasonInconsistentGeometry, "row and column directions of slice %s are not orthogonal", ref.SOPInstanceUID)
	}
	normal := Normal(ref)
	s := &Slices{Normal: normal}
	for _, in := range ins {
		if !in.HasGeometry {
			return nil, midsag.Rejectf(midsag.ReasonInconsistentGeometry, "slice %s has no Image Orientation/Position (Patient)", in.SOPInstanceUID)
		}
		if rowDir(in).dot(r0) < orientationTolerance || colDir(in).dot(c0) < orientationTolerance {
			return nil, midsag.Rejectf(midsag.ReasonInconsistentGeometry,
				"slices %s and %s have different orientations (mixed planes in one series)", ref.SOPInstanceUID, in.SOPInstanceUID)
		}
		if in.Rows != ref.Rows || in.Columns != ref.Columns {
			return nil, midsag.Rejectf(midsag.ReasonInconsistentGeometry, "slices have different matrices (%dx%d and %dx%d)",
				ref.Rows, ref.Columns, in.Rows, in.Columns)
		}
	}
	sort.SliceStable(ins, func(i, j int) bool { return PositionAlong(ins[i], normal) < PositionAlong(ins[j], normal) })
	s.Instances = ins
	for _, in := range ins {
		s.Positions = append(s.Positions, PositionAlong(in, normal))
	}
	if len(ins) > 1 {
		gaps := make([]float64, len(ins)-1)
		for i := range gaps {
			gaps[i] = s.Positions[i+1] - s.Positions[i]
		}
		sorted := append([]float64(nil), gaps...)
		sort.Float64s(sorted)
		med := sorted[len(sorted)/2]
		if med <= 0.01 {
			return nil, midsag.Rejectf(midsag.ReasonInconsistentGeometry, "slices share positions along the normal (duplicates or a multi-echo series)")
		}
		for i, g := range gaps {
			if math.Abs(g-med) > spacingTolerance*med {
				return nil, midsag.Rejectf(midsag.ReasonInconsistentGeometry,
					"gap of %.2f mm between slices %d and %d differs from the series' %.2f mm spacing", g, i, i+1, med)
			}
		}
		s.SpacingMM = med
	}
	return s, nil
}
