package crossphantom

import (
	"encoding/json"
	"math"
	"os/exec"
	"path/filepath"
	"strconv"
	"strings"
	"testing"

	"github.com/midsag/midsag/internal/testtool"
)

// writeStudy writes files under dir and returns their paths.
func writeStudy(t *testing.T, dir string, files []File) []string {
	t.Helper()
	var paths []string
	for _, f := range files {
		paths = append(paths, testtool.WriteFile(t, dir, f.Name, f.Data))
	}
	return paths
}

// TestDciodvfy checks generated files against dicom3tools' dciodvfy,
// which verifies them against the MR Image IOD (PS3.3 A.4): no line may
// be an error. Its warnings are logged. One file of each series is
// checked: the sagittal T2 target, the sagittal T1 and the axial T2.
func TestDciodvfy(t *testing.T) {
	tool := testtool.Command(t, "dciodvfy")
	cfg := DefaultConfig(21)
	cfg.DistractorRate = 1
	files, tr, err := Study(cfg, 3)
	if err != nil {
		t.Fatal(err)
	}
	paths := writeStudy(t, t.TempDir(), files)
	seen := map[string]bool{}
	checked := 0
	for _, p := range paths {
		series := filepath.Base(filepath.Dir(p))
		if seen[series] {
			continue
		}
		seen[series] = true
		// dciodvfy's exit status is not its verdict; its Error lines are.
		out, _ := exec.Command(tool, p).CombinedOutput()
		var errs []string
		for _, line := range strings.Split(string(out), "\n") {
			switch {
			case strings.HasPrefix(line, "Error"):
				errs = append(errs, line)
			case strings.HasPrefix(line, "Warning"):
				t.Logf("%s: %s", series, line)
			}
		}
		if len(errs) > 0 {
			t.Errorf("dciodvfy %s:\n%s", series, out)
		}
		checked++
	}
	if checked != 3 || len(tr.Distractors) == 0 {
		t.Fatalf("checked %d series, %d distractor instances", checked, len(tr.Distractors))
	}
}

// pydicomScript reads every file given on the command line with pydicom
// and prints, per file, what the truth depends on; it computes the
// distance to the truth plane itself, from Image Position and Image
// Orientation (Patient) (PS3.3 C.7.6.2.1.1) and the plane's point.
const pydicomScript = `
import json, sys
import numpy as np
import pydicom
cx, cy, cz = (float(v) for v in sys.argv[1:4])
rows = []
for path in sys.argv[4:]:
    ds = pydicom.dcmread(path)
    iop = [float(v) for v in ds.ImageOrientationPatient]
    ipp = np.array([float(v) for v in ds.ImagePositionPatient])
    n = np.cross(iop[:3], iop[3:])
    px = ds.pixel_array
    rows.append(dict(
        series=ds.SeriesInstanceUID, sop=ds.SOPInstanceUID,
        sopclass=ds.SOPClassUID, ts=ds.file_meta.TransferSyntaxUID,
        instance=int(ds.InstanceNumber),
        acquired=int(ds.get("ImagesInAcquisition", -1)),
        distance=float(np.dot(ipp - np.array([cx, cy, cz]), n)),
        position=float(np.dot(ipp, n)),
        thickness=float(ds.SliceThickness), spacing=float(ds.SpacingBetweenSlices),
        pixel=[float(v) for v in ds.PixelSpacing],
        shape=list(px.shape), max=int(px.max()), rows=int(ds.Rows), cols=int(ds.Columns),
        name=str(ds.PatientName), desc=ds.SeriesDescription, tr=float(ds.RepetitionTime),
        te=float(ds.EchoTime)))
print(json.dumps(rows))
`

// pyRow is one file as pydicom read it.
type pyRow struct {
	Series, Sop, SopClass, TS, Name, Desc string
	Instance, Acquired                    int
	Distance, Position                    float64
	Thickness, Spacing                    float64
	Pixel                                 []float64
	Shape                                 []int
	Max, Rows, Cols                       int
	TR, TE                                float64
}

// TestPydicomGeometry reads one study of every scenario with pydicom
// (Debian's python3-pydicom, a reference reader) and checks that the
// per-slice distances it computes from the files' Image Position and
// Orientation (Patient) and the exported plane equal Truth's, that its
// order along the normal is Truth's order, and that the identifiers,
// counts and pixel data match.
func TestPydicomGeometry(t *testing.T) {
	py := testtool.Python(t, "pydicom", "numpy")
	cfg := DefaultConfig(33)
	cfg.DistractorRate = 0
	dir := t.TempDir()
	for i := range 5 {
		files, tr, err := Study(cfg, i)
		if err != nil {
			t.Fatal(err)
		}
		paths := writeStudy(t, filepath.Join(dir, tr.StudyInstanceUID), files)
		c := tr.Plane.Point
		args := []string{"-c", pydicomScript, fmtF(c[0]), fmtF(c[1]), fmtF(c[2])}
		out, err := exec.Command(py, append(args, paths...)...).Output()
		if err != nil {
			t.Fatalf("study %d: pydicom: %v", i, err)
		}
		var rows []pyRow
		if err := json.Unmarshal(out, &rows); err != nil {
			t.Fatalf("study %d: %v\n%s", i, err, out)
		}
		if len(rows) != tr.SliceCount {
			t.Fatalf("study %d %s: pydicom read %d files, truth has %d slices", i, tr.Scenario, len(rows), tr.SliceCount)
		}
		checkPydicomRows(t, i, tr, rows)
	}
}

// checkPydicomRows compares what pydicom read from one study's files
// with its Truth, file by file, and the order along the normal.
func checkPydicomRows(t *testing.T, i int, tr Truth, rows []pyRow) {
	t.Helper()
	index := map[string]int{}
	for k, uid := range tr.SOPInstanceUIDs {
		index[uid] = k
	}
	order := make([]float64, tr.SliceCount)
	for _, r := range rows {
		k, ok := index[r.Sop]
		if !ok || r.Series != tr.SeriesInstanceUID {
			t.Fatalf("study %d: file %s not in truth", i, r.Sop)
		}
		// DS values carry 6 decimals (PS3.5 6.2 limits DS to 16
		// characters), so positions agree to about 1e-5 mm.
		if d := math.Abs(r.Distance - tr.SliceDistanceMM[k]); d > 1e-3 {
			t.Errorf("study %d slice %d: pydicom distance %.5f, truth %.5f", i, k, r.Distance, tr.SliceDistanceMM[k])
		}
		order[k] = r.Position
		checkPydicomHeader(t, i, k, tr, r)
	}
	for k := 1; k < len(order); k++ {
		if order[k] <= order[k-1] {
			t.Fatalf("study %d: truth slice %d is not after slice %d along the normal", i, k, k-1)
		}
	}
}

// checkPydicomHeader compares one file's identifiers, counts, geometry
// and pixel array, as pydicom read them, with the Truth of slice k.
func checkPydicomHeader(t *testing.T, i, k int, tr Truth, r pyRow) {
	t.Helper()
	if r.Instance != tr.InstanceNumbers[k] || r.Acquired != -1 && r.Acquired != tr.ImagesInAcquisition {
		t.Errorf("study %d slice %d: instance %d acquired %d, truth %d of %d", i, k, r.Instance, r.Acquired, tr.InstanceNumbers[k], tr.ImagesInAcquisition)
	}
	if tr.Scenario == Partial && r.Acquired != tr.ImagesInAcquisition {
		t.Errorf("study %d: partial series without Images in Acquisition", i)
	}
	if r.SopClass != "1.2.840.10008.5.1.4.1.1.4" || r.TS != "1.2.840.10008.1.2.1" {
		t.Errorf("study %d: SOP class %s, transfer syntax %s", i, r.SopClass, r.TS)
	}
	if math.Abs(r.Thickness-tr.ThicknessMM) > 1e-6 || math.Abs(r.Spacing-tr.SpacingMM) > 1e-5 ||
		math.Abs(r.Pixel[0]-tr.PixelSpacingMM) > 1e-6 || math.Abs(r.Pixel[1]-tr.PixelSpacingMM) > 1e-6 {
		t.Errorf("study %d: thickness %g spacing %g pixel %v; truth %g %g %g", i, r.Thickness, r.Spacing, r.Pixel, tr.ThicknessMM, tr.SpacingMM, tr.PixelSpacingMM)
	}
	if r.Shape[0] != tr.Rows || r.Shape[1] != tr.Columns || r.Max > 4095 || r.Max < 500 {
		t.Errorf("study %d: pixel array %v max %d, truth %dx%d", i, r.Shape, r.Max, tr.Rows, tr.Columns)
	}
	if r.TR < 2500 || r.TR > 4500 || r.TE < 90 || r.TE > 120 || !strings.HasPrefix(r.Name, "PHANTOM^CROSS") {
		t.Errorf("study %d: TR %g TE %g name %q", i, r.TR, r.TE, r.Name)
	}
}

// fmtF formats a coordinate for the script's command line, in full
// precision.
func fmtF(v float64) string { return strconv.FormatFloat(v, 'g', -1, 64) }
