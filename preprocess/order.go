package preprocess

import (
	"fmt"
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
	// between slice positions from the series' median gap, or from a
	// whole multiple of it when slices are missing.
	spacingTolerance = 0.2
	// unitTolerance is how far from 1 the length of a direction cosine
	// vector of Image Orientation (Patient) may be: PS3.3 C.7.6.2.1.1
	// makes them unit vectors; scanners round them to about 6 digits.
	unitTolerance = 0.05
)

// FlagSeriesIncomplete is the quality flag of a series scored with slices
// missing at an end of its slab (see Completeness).
const FlagSeriesIncomplete = "series_incomplete"

// SortSlices orders a series' image instances by position along the slice
// normal and checks that orientation, matrix and spacing are consistent
// (PS3.3 C.7.6.2.1.1). Non-positive Pixel Spacing or negative Slice
// Thickness, direction cosines that are not unit vectors and uneven gaps
// are inconsistent_geometry; a gap that is a whole multiple of the spacing
// (slices missing inside the slab) is incomplete_series. Slices missing
// only at an end are not refused: CheckCompleteness reports them.
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
	for _, in := range ins {
		if err := checkPlane(in); err != nil {
			return nil, err
		}
	}
	r0, c0 := rowDir(ref), colDir(ref)
	if math.Abs(r0.dot(c0)) > 1e-3 {
		return nil, midsag.Rejectf(midsag.ReasonInconsistentGeometry, "row and column directions of slice %s are not orthogonal", ref.SOPInstanceUID)
	}
	normal := Normal(ref)
	s := &Slices{Normal: normal}
	for _, in := range ins {
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
		missing, holes := 0, 0
		for i, g := range gaps {
			k := math.Round(g / med)
			switch {
			case math.Abs(g-med) <= spacingTolerance*med:
			case k >= 2 && math.Abs(g-k*med) <= spacingTolerance*med:
				missing += int(k) - 1
				holes++
			default:
				return nil, midsag.Rejectf(midsag.ReasonInconsistentGeometry,
					"gap of %.2f mm between slices %d and %d differs from the series' %.2f mm spacing", g, i, i+1, med)
			}
		}
		if missing > 0 {
			return nil, midsag.Rejectf(midsag.ReasonIncompleteSeries,
				"%d slice(s) missing inside the slab (%d gap(s) along the slice normal that are whole multiples of the %.2f mm spacing); the series was not received completely",
				missing, holes, med)
		}
		s.SpacingMM = med
	}
	return s, nil
}

// checkPlane refuses an instance whose Image Plane attributes (PS3.3
// C.7.6.2) cannot describe a slice: non-finite values, direction cosines
// that are not unit vectors, Pixel Spacing that is not positive, negative
// Slice Thickness. An absent Slice Thickness (Type 2) reads as 0 and is
// accepted; an absent Pixel Spacing is left to the stack, which assumes
// 1 mm.
func checkPlane(in *midsag.Instance) error {
	if !in.HasGeometry {
		return midsag.Rejectf(midsag.ReasonInconsistentGeometry, "slice %s has no Image Orientation/Position (Patient)", in.SOPInstanceUID)
	}
	for _, v := range append(in.ImageOrientation[:], in.ImagePosition[:]...) {
		if math.IsNaN(v) || math.IsInf(v, 0) {
			return midsag.Rejectf(midsag.ReasonInconsistentGeometry, "slice %s has a non-finite Image Orientation/Position (Patient) value", in.SOPInstanceUID)
		}
	}
	o := in.ImageOrientation
	for i, v := range []vec3{{o[0], o[1], o[2]}, {o[3], o[4], o[5]}} {
		if n := v.norm(); math.Abs(n-1) > unitTolerance {
			return midsag.Rejectf(midsag.ReasonInconsistentGeometry,
				"slice %s: the %s direction of Image Orientation (Patient) has length %.3g, not 1 (PS3.3 C.7.6.2.1.1)",
				in.SOPInstanceUID, []string{"row", "column"}[i], n)
		}
	}
	if in.HasPixelSpacing {
		ps := in.PixelSpacing
		if !(ps[0] > 0 && ps[1] > 0) || math.IsInf(ps[0], 0) || math.IsInf(ps[1], 0) {
			return midsag.Rejectf(midsag.ReasonInconsistentGeometry,
				"slice %s has Pixel Spacing %g\\%g mm; both values must be positive (PS3.3 10.7.1.3)", in.SOPInstanceUID, ps[0], ps[1])
		}
	}
	if in.SliceThickness < 0 || math.IsNaN(in.SliceThickness) || math.IsInf(in.SliceThickness, 0) {
		return midsag.Rejectf(midsag.ReasonInconsistentGeometry, "slice %s has Slice Thickness %g mm; it must be positive", in.SOPInstanceUID, in.SliceThickness)
	}
	return nil
}

// Completeness is what a sorted slab's headers say about slices missing at
// its ends; holes inside the slab are refused by SortSlices.
type Completeness struct {
	// Expected is the number of slices the headers say the series holds,
	// zero when they do not say.
	Expected int
	// Missing is how many of those are not in the slab.
	Missing int
	// Flags holds FlagSeriesIncomplete when slices are missing.
	Flags []string
	// Notes says, for a person, what is missing and how it was seen.
	Notes []string
}

// CheckCompleteness compares a sorted slab with what its headers promise:
// Images in Acquisition (0020,1002, PS3.3 C.7.6.1) counts the images of
// one acquisition, so fewer instances of that Acquisition Number (0020,0012)
// means images are missing; Instance Numbers (0020,0013) that follow the
// slab's position order but skip values, or start above 1 (series are
// numbered from 1, common practice), mean instances were not received.
// Multi-frame instances, whose frames share one Instance Number, are
// judged by Images in Acquisition only.
func CheckCompleteness(s *Slices) Completeness {
	var c Completeness
	n := len(s.Instances)
	if n == 0 {
		return c
	}
	multiFrame := false
	for _, in := range s.Instances {
		if in.NumberOfFrames > 1 {
			multiFrame = true
		}
	}
	// Images in Acquisition: per Acquisition Number, the largest value the
	// instances state against how many are here.
	if !multiFrame {
		want, have := map[int]int{}, map[int]int{}
		for _, in := range s.Instances {
			have[in.AcquisitionNumber]++
			want[in.AcquisitionNumber] = max(want[in.AcquisitionNumber], in.ImagesInAcquisition)
		}
		acqs := make([]int, 0, len(want))
		for a := range want {
			acqs = append(acqs, a)
		}
		sort.Ints(acqs)
		for _, a := range acqs {
			if w, h := want[a], have[a]; w > h {
				c.Expected += w
				c.Missing += w - h
				c.Notes = append(c.Notes, fmt.Sprintf("Images in Acquisition (0020,1002) says %d for acquisition %d; %d are here, %d missing", w, a, h, w-h))
			} else {
				c.Expected += h
			}
		}
	}
	if !multiFrame && c.Missing == 0 {
		if miss, note := instanceNumberGaps(s.Instances); miss > 0 {
			c.Missing = miss
			c.Expected = n + miss
			c.Notes = append(c.Notes, note)
		}
	}
	if c.Missing > 0 {
		c.Flags = append(c.Flags, FlagSeriesIncomplete)
	} else {
		c.Expected = 0
	}
	return c
}

// instanceNumberGaps returns how many Instance Numbers are missing from a
// slab whose numbers are distinct, positive and monotonic along the
// normal: values skipped between the smallest and largest, and values
// below the smallest when it is above 1. Numbers that do not follow the
// position order say nothing about completeness and give 0.
func instanceNumberGaps(ins []*midsag.Instance) (int, string) {
	if len(ins) < 2 {
		return 0, ""
	}
	nums := make([]int, len(ins))
	for i, in := range ins {
		if in.InstanceNumber <= 0 {
			return 0, ""
		}
		nums[i] = in.InstanceNumber
	}
	up, down := true, true
	for i := 1; i < len(nums); i++ {
		up = up && nums[i] > nums[i-1]
		down = down && nums[i] < nums[i-1]
	}
	if !up && !down {
		return 0, ""
	}
	lo, hi := nums[0], nums[len(nums)-1]
	if down {
		lo, hi = hi, lo
	}
	// A constant step above 1 is a numbering stride (echoes or phases
	// numbered in turn, common practice), not missing instances.
	step := abs(nums[1] - nums[0])
	for i := 2; i < len(nums) && step > 0; i++ {
		if abs(nums[i]-nums[i-1]) != step {
			step = 0
		}
	}
	inside, before := hi-lo+1-len(nums), lo-1
	if step > 1 {
		inside, before = 0, (lo-1)/step
	}
	if inside+before == 0 {
		return 0, ""
	}
	return inside + before, fmt.Sprintf("Instance Numbers (0020,0013) run %d to %d over %d slices: %d skipped inside the range, %d below it",
		lo, hi, len(nums), inside, before)
}

func abs(n int) int {
	if n < 0 {
		return -n
	}
	return n
}
