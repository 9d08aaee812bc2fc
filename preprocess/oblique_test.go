package preprocess

import (
	"math"
	"strings"
	"testing"
)

// tiltedCues builds the canal cues of a slab of n slices, spacing mm
// apart, through a cord of half-width halfMM (CanalHalfRunMM) whose
// centre lies at slice c0 at the field's top and moves along the slice
// normal by tan(deg) mm per mm of height: the geometry of a plane tilted
// by deg against the slices (plane geometry, outside the picker). A
// slice shows the column on the rows where it passes within halfMM of
// the cord's centre.
func tiltedCues(n int, spacing, c0, deg float64, heightMM int) *midlineCues {
	m := &midlineCues{n: n, spacing: spacing, positions: make([]float64, n), canal: make([]canalCue, n), anat: make([]float64, n)}
	slope := math.Tan(deg * math.Pi / 180)
	maxCol := 0.0
	for i := range m.canal {
		m.positions[i] = float64(i) * spacing
		c := canalCue{HeightMM: float64(heightMM), rows: make([]bool, heightMM)}
		top, bottom := -1, -1
		for y := range c.rows {
			centre := c0*spacing + slope*float64(y)
			if math.Abs(float64(i)*spacing-centre) <= CanalHalfRunMM {
				c.rows[y] = true
				if top < 0 {
					top = y
				}
				bottom = y
				c.ColumnMM++
			}
		}
		if top >= 0 {
			c.TopMM, c.BottomMM = float64(top), float64(bottom+1)
		}
		m.canal[i] = c
		maxCol = max(maxCol, c.ColumnMM)
	}
	for i, c := range m.canal {
		m.anat[i] = c.ColumnMM / maxCol
	}
	return m
}

// TestObliquityMeasuresTilt checks that the per-level canal centres
// recover the drift a tilted plane must show over the measured span,
// tan(deg) * span / spacing slices, and that a plane parallel to the
// slices shows none.
func TestObliquityMeasuresTilt(t *testing.T) {
	for _, tc := range []struct {
		spacing, deg float64
	}{{1, 4}, {1, -3}, {2, 4}, {3, 0}, {1, 0}, {4, 2}, {4, 6}, {3, -5}} {
		// Start the cord so its middle is near the slab's centre.
		n := 21
		c0 := float64(n-1)/2 - math.Tan(tc.deg*math.Pi/180)*100/tc.spacing
		m := tiltedCues(n, tc.spacing, c0, tc.deg, 200)
		f, ok := m.obliquity()
		if !ok {
			t.Fatalf("spacing %.0f mm, %.0f°: no obliquity measured", tc.spacing, tc.deg)
		}
		want := math.Tan(tc.deg*math.Pi/180) * f.spanMM / tc.spacing
		// The half-maximum centre is good to a fraction of a slice; on
		// slices thicker than half the cord's half-width each band's
		// profile is nearly all or nothing, so its centre moves in half
		// slices.
		tol := 0.3
		if tc.spacing > CanalHalfRunMM/2 {
			tol = 0.6
		}
		if math.Abs(f.drift-want) > tol {
			t.Errorf("spacing %.0f mm, %.0f°: drift %.2f slices over %.0f mm, want %.2f", tc.spacing, tc.deg, f.drift, f.spanMM, want)
		}
		if got, exp := f.oblique(), math.Abs(want) > ObliqueMaxDriftSlices+tol; exp && !got {
			t.Errorf("spacing %.0f mm, %.0f°: drift %.2f not reported oblique", tc.spacing, tc.deg, f.drift)
		}
		if tc.deg == 0 && f.oblique() {
			t.Errorf("spacing %.0f mm: parallel plane reported oblique (drift %.2f)", tc.spacing, f.drift)
		}
	}
}

// TestObliquityNote checks that the note states the angle that the
// drift and span imply: atan(drift mm / span mm).
func TestObliquityNote(t *testing.T) {
	f := obliqueFit{bands: 5, spanMM: 60, drift: -4}
	note := f.note(1)
	// atan(4/60) = 3.81°.
	for _, want := range []string{"about 3.8°", "drifts 4.0 mm, 4.0 slices, over 60 mm"} {
		if !strings.Contains(note, want) {
			t.Errorf("note %q lacks %q", note, want)
		}
	}
}
