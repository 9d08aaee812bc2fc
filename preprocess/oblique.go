package preprocess

import (
	"fmt"
	"math"
)

// Obliquity parameters. When the midsagittal plane is not parallel to
// the slices (head yaw or roll, or a slab planned off the cord's axis),
// the slice nearest the plane differs from level to level along the
// cord, and one "midline slice" holds the plane only at some levels.
// The canal column shows which: at each level it is present on the
// slices through the canal, centred on the slice nearest the plane there.
const (
	// obliqueBandMM is the height of the bands of rows measured one at a
	// time: about one cervical level (a vertebral body with its disc is
	// 15 to 20 mm high in adults, from memory), enough rows to average
	// the column's breaks at a level.
	obliqueBandMM = 15.0
	// obliqueMinBands is the fewest bands, each with its profile across
	// the slices whole inside the slab, from which a drift is measured.
	obliqueMinBands = 3
	// obliqueSpanMM is the height, centred on the longest column, over
	// which the bands are measured: the cervical cord from C2 to C7 is
	// five vertebrae of 15 to 20 mm (from memory), and the planned
	// cervical field of view centres on it (common practice); beyond it
	// lie brainstem and thoracic cord, whose slice does not matter to
	// the cervical pick.
	obliqueSpanMM = 90.0
	// ObliqueMaxDriftSlices is the largest drift, in slices, of the
	// canal's per-level centre along the measured cord (the fitted line's
	// change from its first band to its last) for a pick without the
	// flag midline_uncertain: at a drift of one slice the plane lies half
	// a slice either side of the pick's centre at the ends of the cord,
	// so there the neighbouring slice is as near as the picked one, and
	// beyond it the nearest slice changes along the cord.
	ObliqueMaxDriftSlices = 1.0
)

// obliqueFit is the line through the canal's per-level centres.
type obliqueFit struct {
	bands  int
	slope  float64 // slices per mm of height (rows, superior to inferior)
	midMM  float64 // the mean height of the bands
	centre float64 // the fitted centre at midMM, in slices
	spanMM float64 // from the first band's middle to the last's
	drift  float64 // slope times spanMM, in slices
}

// coverage is the fraction of the grid rows [y0, y1) that the column
// covers.
func (c canalCue) coverage(y0, y1 int) float64 {
	n := 0
	for y := max(y0, 0); y < min(y1, len(c.rows)); y++ {
		if c.rows[y] {
			n++
		}
	}
	return float64(n) / float64(max(y1-y0, 1))
}

// bandCentre is the centre, in slices, of the half-maximum run across
// the slices of the canal column's coverage of rows [y0, y1), and
// whether that run is whole inside the slab and the column reaches half
// the band at its peak.
func (m *midlineCues) bandCentre(y0, y1 int) (float64, bool) {
	prof := make([]float64, m.n)
	peak := 0.0
	for i, c := range m.canal {
		if c.dense() {
			prof[i] = c.coverage(y0, y1)
		}
		peak = max(peak, prof[i])
	}
	if peak < 0.5 {
		return 0, false
	}
	for i := range prof {
		prof[i] /= peak
	}
	lo, hi, lowIn, highIn := halfMaxRun(prof)
	return (lo + hi) / 2, lowIn && highIn
}

// obliquity fits a line to the canal's per-level centres along the
// column of the slice where it is longest, in bands of obliqueBandMM
// rows centred on that column; false when fewer than obliqueMinBands
// bands have a whole profile.
func (m *midlineCues) obliquity() (obliqueFit, bool) {
	c := m.canal[argmax(m.anat)]
	band := int(obliqueBandMM / canalGridMM)
	top, bottom := int(c.TopMM/canalGridMM), int(c.BottomMM/canalGridMM)
	if extra := bottom - top - int(obliqueSpanMM/canalGridMM); extra > 0 {
		top += extra / 2
		bottom = top + int(obliqueSpanMM/canalGridMM)
	}
	nb := (bottom - top) / band
	if nb < obliqueMinBands {
		return obliqueFit{}, false
	}
	start := top + (bottom-top-nb*band)/2
	var ys, cs []float64
	for b := 0; b < nb; b++ {
		y0 := start + b*band
		if ctr, ok := m.bandCentre(y0, y0+band); ok {
			ys = append(ys, (float64(y0)+float64(band)/2)*canalGridMM)
			cs = append(cs, ctr)
		}
	}
	if len(ys) < obliqueMinBands {
		return obliqueFit{}, false
	}
	// Least squares from the sums in one pass.
	var sy, sc, syy, syc float64
	for i, y := range ys {
		sy, sc, syy, syc = sy+y, sc+cs[i], syy+y*y, syc+y*cs[i]
	}
	k := float64(len(ys))
	f := obliqueFit{bands: len(ys), midMM: sy / k, centre: sc / k}
	f.slope = (syc - sy*sc/k) / (syy - sy*sy/k)
	f.spanMM = ys[len(ys)-1] - ys[0]
	f.drift = f.slope * f.spanMM
	return f, true
}

// oblique reports whether the fit's drift exceeds ObliqueMaxDriftSlices.
func (f obliqueFit) oblique() bool { return math.Abs(f.drift) > ObliqueMaxDriftSlices }

// note says, for a person, how oblique the plane is to the slices.
func (f obliqueFit) note(spacing float64) string {
	driftMM := math.Abs(f.drift) * spacing
	return fmt.Sprintf("midsagittal plane oblique to the slices by about %.1f° (the canal's centre drifts %.1f mm, %.1f slices, over %.0f mm of cord in %d levels): the slice nearest the plane changes along the cord",
		math.Atan2(driftMM, f.spanMM)*180/math.Pi, driftMM, math.Abs(f.drift), f.spanMM, f.bands)
}
