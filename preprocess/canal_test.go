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

// TestRowTripletsBodyOutline checks, on rows built by hand, that a
// bright-dark-bright crossing deep in the body counts and the same
// crossing at the body's surface (skin over subcutaneous fat, which is
// bright on T2, common practice) does not.
func TestRowTripletsBodyOutline(t *testing.T) {
	// row returns 120 mm of background with body from lo to hi a little
	// above the outline level, and CSF (1.0) over c-5..c+5 either side of
	// a cord (0.5) over c-2..c+2: the crossing's flanks are the CSF pixels
	// next to the cord, c-3 and c+3.
	body := float32(canalBodyLevel + 0.05)
	row := func(lo, hi, c int) []float32 {
		p := make([]float32, 120)
		for x := lo; x <= hi; x++ {
			p[x] = body
		}
		for x := c - 5; x <= c+5; x++ {
			p[x] = 1
		}
		for x := c - 2; x <= c+2; x++ {
			p[x] = 0.5
		}
		return p
	}
	cases := []struct {
		name string
		p    []float32
		want bool
	}{
		{"deep", row(10, 110, 60), true},
		// The posterior flank is 2 mm inside the outline.
		{"posterior surface", row(10, 105, 100), false},
		// The anterior flank is 11 mm inside the outline.
		{"anterior surface", row(10, 110, 24), false},
		// The anterior flank exactly canalInsetMM (15 mm) inside it, and
		// one millimetre short of that.
		{"at the inset", row(0, 119, 18), true},
		{"short of the inset", row(0, 119, 17), false},
	}
	for _, c := range cases {
		tr := rowTriplets(c.p, 1)
		if got := len(tr) > 0; got != c.want {
			t.Errorf("%s: crossing found %v, want %v (%v)", c.name, got, c.want, tr)
		}
	}
}

// TestNeighbourSpan checks the column length that keeps a slab on
// columns worked by hand: a neighbour's column adds the rows it reaches
// beyond the slice's own, and a column whose rows cover less than
// CanalMinDensity of its extent counts for nothing.
func TestNeighbourSpan(t *testing.T) {
	cues := []canalCue{
		{ColumnMM: 60, TopMM: 10, BottomMM: 70},   // joins slice 1 above
		{ColumnMM: 80, TopMM: 60, BottomMM: 140},  // the middle
		{ColumnMM: 50, TopMM: 130, BottomMM: 180}, // joins below
		{ColumnMM: 40, TopMM: 10, BottomMM: 200},  // sparse: 40 of 190 mm
		{ColumnMM: 30, TopMM: 160, BottomMM: 190}, // its only neighbour is sparse
	}
	m := &midlineCues{n: len(cues), canal: cues}
	want := []float64{
		60 + 70, // rows 70..140 of slice 1 beyond its own 10..70
		80 + 50 + 40,
		50 + 70, // slice 1 reaches 70 mm above; slice 3 is sparse
		0,
		30,
	}
	for i, w := range want {
		if got := m.neighbourSpan(i); got != w {
			t.Errorf("slice %d: span %.0f mm, want %.0f", i, got, w)
		}
	}
}
