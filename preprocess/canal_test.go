package preprocess

import (
	"math"
	"testing"
)

// TestHalfMaxRun checks the full width at half maximum on profiles worked
// by hand: linear interpolation between the samples either side of half
// the peak (the usual FWHM construction, common practice).
func TestHalfMaxRun(t *testing.T) {
	cases := []struct {
		name          string
		a             []float64
		lo, hi        float64
		lowIn, highIn bool
		centre        float64
	}{
		// 0.25 -> 0.75 crosses 0.5 half-way: 1.5; 0.75 -> 0.25: 4.5.
		{"symmetric", []float64{0, 0.25, 0.75, 1, 0.75, 0.25, 0}, 1.5, 4.5, true, true, 3},
		// Left: 0.2 -> 0.8 at 1 + 0.3/0.6 = 1.5; right: 1 -> 0.4 at 3 + 0.5/0.6.
		{"asymmetric", []float64{0, 0.2, 0.8, 1, 0.4, 0}, 1.5, 3 + 0.5/0.6, true, true, (1.5 + 3 + 0.5/0.6) / 2},
		// Still above half at the last slice: the high side is unknown.
		{"cut", []float64{0, 0.2, 0.6, 0.9, 1}, 1 + 0.3/0.4, 4.5, true, false, (1 + 0.3/0.4 + 4.5) / 2},
		// A plateau of equal peaks is centred on its middle.
		{"plateau", []float64{0, 1, 1, 1, 0}, 0.5, 3.5, true, true, 2},
	}
	for _, c := range cases {
		lo, hi, lowIn, highIn := halfMaxRun(c.a)
		if math.Abs(lo-c.lo) > 1e-9 || math.Abs(hi-c.hi) > 1e-9 || lowIn != c.lowIn || highIn != c.highIn {
			t.Errorf("%s: run %.3f..%.3f (%v, %v), want %.3f..%.3f (%v, %v)", c.name, lo, hi, lowIn, highIn, c.lo, c.hi, c.lowIn, c.highIn)
		}
		if got := (lo + hi) / 2; math.Abs(got-c.centre) > 1e-9 {
			t.Errorf("%s: centre %.3f, want %.3f", c.name, got, c.centre)
		}
	}
}
