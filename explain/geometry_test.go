package explain

import (
	"math"
	"testing"

	"github.com/midsag/midsag"
	"github.com/midsag/midsag/preprocess"
)

// TestGeometryMatchesStack checks inputGeometry against preprocess.Stack,
// the code that builds the input: a bright block placed on a slice in
// several orientations is found by Stack somewhere on the input grid, and
// toSlice must map that place back onto the block. Orientation cosines
// follow PS3.3 C.7.6.2.1.1 (row direction, then column direction).
func TestGeometryMatchesStack(t *testing.T) {
	const rows, cols, r0, c0 = 60, 80, 13, 52
	orients := map[string][6]float64{
		"A-P rows, F-H columns":     {0, 1, 0, 0, 0, -1},
		"P-A rows, F-H columns":     {0, -1, 0, 0, 0, -1},
		"A-P rows, H-F columns":     {0, 1, 0, 0, 0, 1},
		"H-F rows, A-P columns":     {0, 0, -1, 0, 1, 0},
		"F-H rows, P-A columns":     {0, 0, 1, 0, -1, 0},
		"tilted A-P rows, F-H cols": {0, math.Cos(0.1), math.Sin(0.1), 0, math.Sin(0.1), -math.Cos(0.1)},
	}
	for name, o := range orients {
		for _, mm := range []float64{0, 1.2} {
			in := &midsag.Instance{ImageOrientation: o, PixelSpacing: [2]float64{0.8, 1.1}, Rows: rows, Columns: cols, HasGeometry: true}
			img := &midsag.Image{Rows: rows, Columns: cols, Pix: make([]float32, rows*cols)}
			for y := r0 - 1; y <= r0+1; y++ {
				for x := c0 - 1; x <= c0+1; x++ {
					img.Pix[y*cols+x] = 1000
				}
			}
			spec := midsag.InputSpec{Layout: "NCHW", Height: 64, Width: 64, Slices: 1, Normalize: "percentile", PercentileHigh: 100, PixelSpacingMM: mm}
			s := &preprocess.Slices{Instances: []*midsag.Instance{in}, Images: []*midsag.Image{img}, Normal: preprocess.Normal(in)}
			tn, _, err := preprocess.Stack(s, spec)
			if err != nil {
				t.Fatal(err)
			}
			var sy, sx, sw float64
			for y := 0; y < 64; y++ {
				for x := 0; x < 64; x++ {
					v := float64(tn.Data[y*64+x])
					sy, sx, sw = sy+v*float64(y), sx+v*float64(x), sw+v
				}
			}
			row, col := newInputGeometry(in, spec).toSlice(sy/sw, sx/sw)
			if math.Abs(row-r0) > 0.6 || math.Abs(col-c0) > 0.6 {
				t.Errorf("%s, spacing %g: block at (%d,%d) maps back to (%.2f,%.2f)", name, mm, r0, c0, row, col)
			}
		}
	}
}

// TestPatientMM checks PS3.3 C.7.6.2.1.1's equation on a hand-worked
// case: IPP (10,20,30), rows along +y, columns along −z, Δr 0.5, Δc 2:
// pixel (row 4, col 3) is (10, 20 + 3·2, 30 − 4·0.5).
func TestPatientMM(t *testing.T) {
	in := &midsag.Instance{ImagePosition: [3]float64{10, 20, 30}, ImageOrientation: [6]float64{0, 1, 0, 0, 0, -1}, PixelSpacing: [2]float64{0.5, 2}}
	if got := PatientMM(in, 4, 3); got != [3]float64{10, 26, 28} {
		t.Errorf("got %v, want [10 26 28]", got)
	}
}
