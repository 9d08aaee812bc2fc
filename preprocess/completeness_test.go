package preprocess

import (
	"bytes"
	"math"
	"os"
	"path/filepath"
	"strings"
	"testing"

	"github.com/midsag/midsag"
	"github.com/midsag/midsag/internal/testtool"
)

// withoutFiles returns the study's only series without the instances
// whose source path ends in one of names.
func withoutFiles(st *midsag.Study, names ...string) *midsag.Series {
	se := *st.Series[0]
	se.Instances = nil
	for _, in := range st.Series[0].Instances {
		drop := false
		for _, n := range names {
			drop = drop || strings.HasSuffix(in.Source, n)
		}
		if !drop {
			se.Instances = append(se.Instances, in)
		}
	}
	return &se
}

// TestCompletenessOnRealSeries cuts slices out of a real 20-slice series
// (testdata/realdata, Toshiba DTI_SAG_30d: Instance Numbers 1 to 20 in
// position order, 3 mm apart, as dcmdump shows) and reads a real Philips
// series numbered 1, 4, 7 ... 25 (one dynamic of nine slices).
func TestCompletenessOnRealSeries(t *testing.T) {
	real := seriesRealdata(t)
	st := readRealSeries(t, real, "vendor/dcm_qa_toshiba/In/Galan/6006_DTI_SAG_30d/*.dcm")
	for _, in := range st.Series[0].Instances {
		if in.Source == "" {
			t.Fatal("instances carry no source path")
		}
	}

	full, err := SortSlices(st.Series[0])
	if err != nil {
		t.Fatalf("whole series: %v", err)
	}
	if c := CheckCompleteness(full); c.Missing != 0 || len(c.Flags) != 0 {
		t.Errorf("whole series: %+v, want complete", c)
	}

	// A slice gone from inside the slab: refused.
	if _, err := SortSlices(withoutFiles(st, "0010.dcm", "0011.dcm")); !isReason(err, midsag.ReasonIncompleteSeries) {
		t.Errorf("slices 10 and 11 missing: %v, want incomplete_series", err)
	} else if !strings.Contains(err.Error(), "2 slice(s) missing inside the slab") {
		t.Errorf("message %q does not say how many are missing", err)
	}

	// The first two gone: positions are even, Instance Numbers start at 3.
	sl, err := SortSlices(withoutFiles(st, "0001.dcm", "0002.dcm"))
	if err != nil {
		t.Fatalf("first two missing: %v", err)
	}
	c := CheckCompleteness(sl)
	if c.Missing != 2 || c.Expected != 20 || len(c.Flags) != 1 || c.Flags[0] != FlagSeriesIncomplete {
		t.Errorf("first two missing: %+v, want 2 of 20 missing and %s", c, FlagSeriesIncomplete)
	}

	// Philips numbers the slices of one dynamic 1, 4, 7 ...: a stride,
	// not missing instances.
	ph := readRealSeries(t, real, "vendor/dcm_qa_philips/In/Magdeburg_2014/fmri/201_EPI_asc_CLEAR_0001_*.dcm")
	psl, err := SortSlices(ph.Series[0])
	if err != nil {
		t.Fatalf("Philips dynamic: %v", err)
	}
	if c := CheckCompleteness(psl); c.Missing != 0 {
		t.Errorf("Philips stride-3 numbering: %+v, want complete", c)
	}
}

// TestCompletenessFromImagesInAcquisition uses Images in Acquisition
// (0020,1002, PS3.3 C.7.6.1): 12 slices of an acquisition that says 15 are
// scored with series_incomplete and 3 missing; one that says 12 is
// complete; two acquisitions are counted apart.
func TestCompletenessFromImagesInAcquisition(t *testing.T) {
	mk := func(iia int, acq func(i int) int) *Slices {
		se := protocolSeries("1.2.9", "sag t2", 12, func(in *midsag.Instance) { in.ImagesInAcquisition = iia })
		for i, in := range se.Instances {
			in.AcquisitionNumber = acq(i)
		}
		sl, err := SortSlices(se)
		if err != nil {
			t.Fatal(err)
		}
		return sl
	}
	one := func(int) int { return 1 }
	if c := CheckCompleteness(mk(15, one)); c.Missing != 3 || c.Expected != 15 || len(c.Flags) != 1 || !strings.Contains(c.Notes[0], "3 missing") {
		t.Errorf("15 promised, 12 here: %+v", c)
	}
	if c := CheckCompleteness(mk(12, one)); c.Missing != 0 || len(c.Flags) != 0 {
		t.Errorf("12 promised, 12 here: %+v", c)
	}
	// Two acquisitions of six, each saying 6: complete; saying 7: 2 missing.
	two := func(i int) int { return 1 + i%2 }
	if c := CheckCompleteness(mk(6, two)); c.Missing != 0 {
		t.Errorf("2 x 6 promised, 2 x 6 here: %+v", c)
	}
	if c := CheckCompleteness(mk(7, two)); c.Missing != 2 {
		t.Errorf("2 x 7 promised, 2 x 6 here: %+v", c)
	}
}

// TestInstanceNumberGaps: numbers skipped inside the range, numbers that
// do not follow the positions (ignored) and descending numbers.
func TestInstanceNumberGaps(t *testing.T) {
	set := func(nums ...int) *Slices {
		se := protocolSeries("1.2.10", "sag t2", len(nums), func(*midsag.Instance) {})
		for i, in := range se.Instances {
			in.InstanceNumber = nums[i]
		}
		sl, err := SortSlices(se)
		if err != nil {
			t.Fatal(err)
		}
		return sl
	}
	// protocolSeries places slice i at x = 3i - 20; the normal is -x, so
	// SortSlices orders them last to first: numbers given in x order.
	cases := []struct {
		nums    []int
		missing int
	}{
		{[]int{1, 2, 3, 4, 5, 6}, 0},
		{[]int{1, 2, 3, 5, 6, 7}, 1},
		{[]int{6, 5, 4, 3, 2, 1}, 0},
		{[]int{8, 7, 6, 5, 4, 3}, 2},
		{[]int{3, 1, 2, 6, 5, 4}, 0},
		{[]int{2, 4, 6, 8, 10, 12}, 0},
	}
	for _, c := range cases {
		if got := CheckCompleteness(set(c.nums...)); got.Missing != c.missing {
			t.Errorf("Instance Numbers %v: %+v, want %d missing", c.nums, got, c.missing)
		}
	}
}

// TestSortSlicesRefusesBadPlane: Pixel Spacing zero or negative, negative
// Slice Thickness, zero-length or non-unit direction cosines and
// non-finite positions are inconsistent_geometry (PS3.3 C.7.6.2.1.1 and
// 10.7.1.3), and no message carries Go runtime text.
func TestSortSlicesRefusesBadPlane(t *testing.T) {
	cases := map[string]func(*midsag.Instance){
		"zero pixel spacing":     func(in *midsag.Instance) { in.PixelSpacing = [2]float64{0, 0.8} },
		"negative pixel spacing": func(in *midsag.Instance) { in.PixelSpacing = [2]float64{-0.8, -0.8} },
		"negative thickness":     func(in *midsag.Instance) { in.SliceThickness = -3 },
		"zero-length row":        func(in *midsag.Instance) { in.ImageOrientation = [6]float64{0, 0, 0, 0, 0, -1} },
		"zero orientation":       func(in *midsag.Instance) { in.ImageOrientation = [6]float64{} },
		"non-unit column":        func(in *midsag.Instance) { in.ImageOrientation = [6]float64{0, 1, 0, 0, 0, -2} },
		"NaN position":           func(in *midsag.Instance) { in.ImagePosition[0] = math.NaN() },
		"pixel spacing on one":   nil,
	}
	for name, mod := range cases {
		se := protocolSeries("1.2.11", "sag t2", 6, func(*midsag.Instance) {})
		for _, in := range se.Instances {
			in.HasPixelSpacing = true
		}
		if mod == nil {
			se.Instances[3].PixelSpacing = [2]float64{0.8, 0}
		} else {
			mod(se.Instances[0])
		}
		_, err := SortSlices(se)
		if !isReason(err, midsag.ReasonInconsistentGeometry) {
			t.Errorf("%s: %v, want inconsistent_geometry", name, err)
			continue
		}
		for _, bad := range []string{"runtime error", "nil pointer", "panic", "goroutine"} {
			if strings.Contains(err.Error(), bad) {
				t.Errorf("%s: message %q carries Go runtime text", name, err)
			}
		}
	}
	// Absent Pixel Spacing is left to the stack (it assumes 1 mm).
	se := protocolSeries("1.2.12", "sag t2", 6, func(in *midsag.Instance) { in.PixelSpacing = [2]float64{} })
	if _, err := SortSlices(se); err != nil {
		t.Errorf("absent Pixel Spacing: %v", err)
	}
}

// TestDedupe reads a real file (testdata/realdata Toshiba slice 1) twice
// under two names, which is a resend and dropped, and once more after
// DCMTK's dcmodify changed its Echo Time, which keeps the SOP Instance UID
// and is refused as duplicate_instance naming the UID.
func TestDedupe(t *testing.T) {
	real := seriesRealdata(t)
	src := filepath.Join(real, "vendor/dcm_qa_toshiba/In/Galan/6006_DTI_SAG_30d/0001.dcm")
	data, err := os.ReadFile(src)
	if err != nil {
		t.Fatal(err)
	}
	dir := t.TempDir()
	changed := filepath.Join(dir, "changed.dcm")
	if err := os.WriteFile(changed, data, 0o644); err != nil {
		t.Fatal(err)
	}
	testtool.Run(t, "dcmodify", "-nb", "-m", "(0018,0081)=95", changed)
	pre := New(Options{})
	read := func(name string, b []byte) *midsag.Instance {
		in, err := pre.Read(name, bytes.NewReader(b))
		if err != nil {
			t.Fatalf("%s: %v", name, err)
		}
		in.Source = name
		return in
	}
	a, b := read("a/0001.dcm", data), read("b/0001.dcm", data)
	out, err := Dedupe([]*midsag.Instance{a, b})
	if err != nil || len(out) != 1 || out[0] != a {
		t.Fatalf("identical resend: %d kept, %v; want the first kept", len(out), err)
	}
	cb, err := os.ReadFile(changed)
	if err != nil {
		t.Fatal(err)
	}
	c := read("changed.dcm", cb)
	if c.SOPInstanceUID != a.SOPInstanceUID || c.EchoTime != 95 {
		t.Fatalf("dcmodify result: UID %s TE %v", c.SOPInstanceUID, c.EchoTime)
	}
	_, err = Dedupe([]*midsag.Instance{a, b, c})
	if !isReason(err, midsag.ReasonDuplicateInstance) {
		t.Fatalf("different content: %v, want duplicate_instance", err)
	}
	for _, want := range []string{a.SOPInstanceUID, "header attributes differ", "a/0001.dcm", "changed.dcm"} {
		if !strings.Contains(err.Error(), want) {
			t.Errorf("message %q lacks %q", err, want)
		}
	}
	// Same header, other pixel bytes.
	d := read("d.dcm", data)
	d.PixelData = append([]byte(nil), d.PixelData...)
	d.PixelData[0] ^= 1
	if _, err := Dedupe([]*midsag.Instance{a, d}); !isReason(err, midsag.ReasonDuplicateInstance) || !strings.Contains(err.Error(), "pixel data differs") {
		t.Errorf("different pixels: %v", err)
	}
	// Frames of one multi-frame instance share the UID and are not duplicates.
	f0, f1 := *a, *a
	f1.Frame = 1
	if out, err := Dedupe([]*midsag.Instance{&f0, &f1}); err != nil || len(out) != 2 {
		t.Errorf("two frames of one instance: %d kept, %v", len(out), err)
	}
}

// TestNoRuntimeTextOnRealFiles reads every file of shared/realdata and of
// pydicom's test files, and picks a series and sorts its slices where the
// read succeeds: every refusal is a *midsag.Error whose message carries no
// Go runtime text (issue 10 found a nil-pointer panic's text in one).
func TestNoRuntimeTextOnRealFiles(t *testing.T) {
	real := seriesRealdata(t)
	pydicomDir := filepath.Dir(testtool.PydicomFile(t, "MR_small.dcm"))
	var paths []string
	for _, root := range []string{real, pydicomDir} {
		filepath.Walk(root, func(p string, info os.FileInfo, err error) error {
			if err == nil && info.Mode().IsRegular() {
				paths = append(paths, p)
			}
			return nil
		})
	}
	if len(paths) < 100 {
		t.Fatalf("only %d files found", len(paths))
	}
	bad := []string{"runtime error", "nil pointer", "panic", "goroutine", "invalid memory address", "index out of range"}
	check := func(p string, err error) {
		if err == nil {
			return
		}
		if midsag.RefusalOf(err) == nil {
			t.Errorf("%s: %v is not a refusal", p, err)
		}
		for _, b := range bad {
			if strings.Contains(err.Error(), b) {
				t.Errorf("%s: message %q carries Go runtime text", p, err)
			}
		}
	}
	pre := New(Options{Lenient: true})
	for _, p := range paths {
		data, err := os.ReadFile(p)
		if err != nil {
			t.Fatal(err)
		}
		in, err := pre.Read(p, bytes.NewReader(data))
		check(p, err)
		if err != nil {
			continue
		}
		in.Source = p
		st := Group([]*midsag.Instance{in})[0]
		_, _, _, err = PickSeries(st, 1)
		check(p, err)
		_, err = SortSlices(st.Series[0])
		check(p, err)
	}
}
