package holdoutphantom

import (
	"bytes"
	"math"

	"os/exec"
	"path/filepath"
	"sort"
	"strings"
	"testing"

	"github.com/midsag/midsag/internal/testtool"
)

// TestSeriesReadBackWithPydicom checks generated series against an
// outside reader: pydicom (Debian's python3-pydicom) must read every
// file, find MR Image Storage in Explicit VR Little Endian with the
// acquisition the brief asks for (TE >= 80 ms, TR 2500-4000 ms, SE, 2D,
// matrix 256-512, FOV 200-280 mm, 1-4 mm slices, 9-31 per slab), and its
// slice positions (PS3.3 C.7.6.2.1.1: Image Position (Patient) dotted with
// the row x column normal) must match the truth, put the truth's slice
// nearest the plane and agree on whether the slab holds it.
func TestSeriesReadBackWithPydicom(t *testing.T) {
	cases := Generate(t, Options{N: 8, First: 22, Seed: 11})
	dirs := make([]string, len(cases))
	for i, c := range cases {
		dirs[i] = c.Dir
	}
	reps := Check(t, dirs...)
	if len(reps) != len(cases) {
		t.Fatalf("%d reports for %d series", len(reps), len(cases))
	}
	inSlab := map[string][2]int{}
	for i, r := range reps {
		tr := cases[i].Truth
		for _, e := range r.Errors {
			t.Errorf("%s: %s", filepath.Base(r.Dir), e)
		}
		if r.Files != tr.Slices {
			t.Errorf("%s: pydicom read %d files of %d", filepath.Base(r.Dir), r.Files, tr.Slices)
		}
		if r.Nearest != tr.MidlineSOPInstanceUID {
			t.Errorf("%s: pydicom's nearest slice %s, truth %s", filepath.Base(r.Dir), r.Nearest, tr.MidlineSOPInstanceUID)
		}
		if r.InSlab != tr.InSlab || math.Abs(r.DistanceMM-tr.SignedDistanceMM) > 1e-3 {
			t.Errorf("%s: pydicom in slab %v at %.4f mm, truth %v at %.4f mm", filepath.Base(r.Dir), r.InSlab, r.DistanceMM, tr.InSlab, tr.SignedDistanceMM)
		}
		if math.Abs(tr.SignedDistanceMM) > tr.SpacingMM/2+1e-6 && tr.InSlab {
			t.Errorf("%s: in-slab plane %.3f mm from its nearest slice, beyond half the %.3f mm spacing", filepath.Base(r.Dir), tr.SignedDistanceMM, tr.SpacingMM)
		}
		n := inSlab[tr.Scenario]
		if tr.InSlab {
			n[0]++
		} else {
			n[1]++
		}
		inSlab[tr.Scenario] = n
	}
	// The scenarios' promises: centred and offset slabs hold the midline,
	// lateral-only slabs never do.
	for sc, n := range inSlab {
		switch {
		case (sc == "centred" || sc == "offset") && n[1] > 0:
			t.Errorf("%s: %d series miss the midline", sc, n[1])
		case sc == "lateral_only" && n[0] > 0:
			t.Errorf("lateral_only: %d series hold the midline", n[0])
		}
	}
}

// TestSeriesVerifyWithDciodvfy runs dicom3tools' dciodvfy, the outside
// reference for the MR Image IOD (PS3.3 A.4), on the first, middle and
// last file of two series: no line may say "Error".
func TestSeriesVerifyWithDciodvfy(t *testing.T) {
	dciodvfy := testtool.Command(t, "dciodvfy")
	cases := Generate(t, Options{N: 2, First: 5, Seed: 3})
	for _, c := range cases {
		n := len(c.Files)
		for _, f := range []File{c.Files[0], c.Files[n/2], c.Files[n-1]} {
			p := filepath.Join(c.Dir, filepath.Base(f.Name))
			out, _ := exec.Command(dciodvfy, p).CombinedOutput()
			for _, l := range strings.Split(string(out), "\n") {
				if strings.Contains(l, "Error") {
					t.Errorf("dciodvfy %s: %s", f.Name, l)
				}
			}
			if !strings.Contains(string(out), "MRImage") {
				t.Errorf("dciodvfy did not take %s for an MR image:\n%s", f.Name, out)
			}
		}
	}
}

// TestTruthByConstruction sets the pose by hand (no yaw, roll, pitch or
// slab obliquity; 21 slices of 3 mm) and places the cord's plane 2.3
// slices one way, 3.6 the other and 11.2 (past the edge) from the slab's
// centre. The truth must name the slice those offsets round to, with the
// remainder as its distance; and, read back with pydicom from noise-free
// images, the centroid across slices of the CSF-bright pixels in the neck
// (the dural sac, symmetric about the cord but for a lateral bow of at
// most 1.2 mm) must lie within half a spacing plus that bow of the plane.
func TestTruthByConstruction(t *testing.T) {
	for _, tc := range []struct {
		fixed  string
		index  int     // position-sorted index of the nearest slice
		frac   float64 // signed distance in spacings
		inSlab bool
	}{
		{"0,0,2.3", 12, 0.3, true},
		{"0,0,-3.6", 6, 0.4, true},
		{"0,0,11.2", 20, 1.2, false},
	} {
		c := Generate(t, Options{N: 1, First: 16, Seed: 5, Clean: true, Fixed: tc.fixed, Slices: 21})[0]
		tr := c.Truth
		if tr.ThicknessMM != 3 || tr.Slices != 21 {
			t.Fatalf("%s: got %v mm x %d slices, want 3 mm x 21", tc.fixed, tr.ThicknessMM, tr.Slices)
		}
		order := make([]int, tr.Slices)
		for i := range order {
			order[i] = i
		}
		sort.Slice(order, func(a, b int) bool { return tr.SlicePositionsMM[order[a]] < tr.SlicePositionsMM[order[b]] })
		if got := tr.SOPInstanceUIDs[order[tc.index]]; got != tr.MidlineSOPInstanceUID {
			t.Errorf("%s: truth names %s, the slice %d along the normal is %s", tc.fixed, tr.MidlineSOPInstanceUID, tc.index, got)
		}
		if want := tc.frac * tr.SpacingMM; math.Abs(tr.SignedDistanceMM-want) > 1e-6 {
			t.Errorf("%s: distance %.4f mm, want %.4f", tc.fixed, tr.SignedDistanceMM, want)
		}
		if tr.InSlab != tc.inSlab {
			t.Errorf("%s: in slab %v, want %v", tc.fixed, tr.InSlab, tc.inSlab)
		}
		r := Check(t, c.Dir)[0]
		if d := math.Abs(r.CSFCentroidMM - tr.PlanePositionMM); tc.inSlab && d > tr.SpacingMM/2+1.2 {
			t.Errorf("%s: CSF centroid %.2f mm, plane %.2f mm: %.2f mm apart", tc.fixed, r.CSFCentroidMM, tr.PlanePositionMM, d)
		}
	}
}

// TestSameSeedSameBytes: the family is reproducible, so a rate measured
// on it can be measured again.
func TestSameSeedSameBytes(t *testing.T) {
	a := Generate(t, Options{N: 1, First: 2, Seed: 9, Slices: 9})[0]
	b := Generate(t, Options{N: 1, First: 2, Seed: 9, Slices: 9})[0]
	c := Generate(t, Options{N: 1, First: 2, Seed: 10, Slices: 9})[0]
	for i := range a.Files {
		if !bytes.Equal(a.Files[i].Data, b.Files[i].Data) {
			t.Fatalf("%s differs between two runs of seed 9", a.Files[i].Name)
		}
	}
	if bytes.Equal(a.Files[0].Data, c.Files[0].Data) {
		t.Error("seeds 9 and 10 wrote the same first file")
	}
}
