package preprocess

import (
	"math"
	"testing"

	"github.com/midsag/midsag"
)

// TestPositionAlongNormal checks PositionAlong against the PS3.3
// C.7.6.2.1.1 construction worked by hand: the slice normal is the cross
// product of the row and column direction cosines, and a slice's position
// is Image Position (Patient) projected onto it.
func TestPositionAlongNormal(t *testing.T) {
	cases := []struct {
		name   string
		iop    [6]float64
		ipp    [3]float64
		normal [3]float64
		pos    float64
	}{
		// Axial: rows along +x, columns along +y; normal +z; position = z.
		{"axial", [6]float64{1, 0, 0, 0, 1, 0}, [3]float64{-120, -110, 37.5}, [3]float64{0, 0, 1}, 37.5},
		// Sagittal: rows along +y, columns along -z; normal = y x (-z) = -x.
		{"sagittal", [6]float64{0, 1, 0, 0, 0, -1}, [3]float64{12.25, -100, 90}, [3]float64{-1, 0, 0}, -12.25},
		// Coronal: rows +x, columns -z; normal = x x (-z) = +y.
		{"coronal", [6]float64{1, 0, 0, 0, 0, -1}, [3]float64{-100, 8, 90}, [3]float64{0, 1, 0}, 8},
		// Sagittal tilted 30 degrees about z: row (sin30, cos30, 0) =
		// (0.5, 0.8660254, 0), column (0,0,-1); normal = row x col =
		// (-0.8660254, 0.5, 0). Position of (10, 20, 30):
		// -8.660254 + 10 = 1.339746.
		{"oblique", [6]float64{0.5, 0.8660254, 0, 0, 0, -1}, [3]float64{10, 20, 30}, [3]float64{-0.8660254, 0.5, 0}, 1.339746},
	}
	for _, c := range cases {
		in := &midsag.Instance{ImageOrientation: c.iop, ImagePosition: c.ipp, HasGeometry: true}
		n := Normal(in)
		for i := range n {
			if math.Abs(n[i]-c.normal[i]) > 1e-6 {
				t.Errorf("%s: normal %v, want %v", c.name, n, c.normal)
				break
			}
		}
		if p := PositionAlong(in, n); math.Abs(p-c.pos) > 1e-5 {
			t.Errorf("%s: position %.6f, want %.6f", c.name, p, c.pos)
		}
	}
}

// TestSortSlicesRefusesBadGeometry checks the inconsistent_geometry
// refusals: mixed orientations and an uneven gap.
func TestSortSlicesRefusesBadGeometry(t *testing.T) {
	mk := func(x float64, iop [6]float64) *midsag.Instance {
		return &midsag.Instance{SOPInstanceUID: "1.2." + string(rune('a'+int(x))), Rows: 4, Columns: 4,
			ImageOrientation: iop, ImagePosition: [3]float64{x, 0, 0}, HasGeometry: true}
	}
	sag := [6]float64{0, 1, 0, 0, 0, -1}
	ax := [6]float64{1, 0, 0, 0, 1, 0}
	mixed := &midsag.Series{Instances: []*midsag.Instance{mk(0, sag), mk(3, sag), mk(6, ax)}}
	if _, err := SortSlices(mixed); !isReason(err, midsag.ReasonInconsistentGeometry) {
		t.Errorf("mixed orientations: %v", err)
	}
	gap := &midsag.Series{Instances: []*midsag.Instance{mk(0, sag), mk(3, sag), mk(6, sag), mk(10.5, sag)}}
	if _, err := SortSlices(gap); !isReason(err, midsag.ReasonInconsistentGeometry) {
		t.Errorf("uneven gap: %v", err)
	}
	ok := &midsag.Series{Instances: []*midsag.Instance{mk(6, sag), mk(0, sag), mk(3, sag)}}
	s, err := SortSlices(ok)
	if err != nil {
		t.Fatal(err)
	}
	// Normal is -x, so positions ascend as x descends.
	if s.Instances[0].ImagePosition[0] != 6 || s.SpacingMM != 3 {
		t.Errorf("sorted first x %v spacing %v, want 6 and 3", s.Instances[0].ImagePosition[0], s.SpacingMM)
	}
}

func isReason(err error, r midsag.Reason) bool {
	got, ok := midsag.ReasonOf(err)
	return ok && got == r
}
