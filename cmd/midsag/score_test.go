package main

import (
	"archive/zip"
	"bytes"
	"compress/gzip"
	"context"
	"encoding/json"
	"os"
	"path/filepath"
	"strings"
	"testing"

	"github.com/midsag/midsag"
	"github.com/midsag/midsag/internal/ortest"
	"github.com/midsag/midsag/internal/testtool"
	"github.com/midsag/midsag/phantom"
)

// requireORT skips (or, with MIDSAG_REQUIRE_TOOLS=1, fails) a test when the
// ONNX Runtime library is not installed (make ort).
func requireORT(t testing.TB) { ortest.Init(t) }

// phantomStudy writes one phantom study and returns its folder and truth.
func phantomStudy(t *testing.T, opts phantom.Options) (string, phantom.StudyTruth) {
	t.Helper()
	dir := t.TempDir()
	truths, err := phantom.Generate(dir, opts)
	if err != nil {
		t.Fatal(err)
	}
	return filepath.Join(dir, truths[0].Study), truths[0]
}

func runCLI(args ...string) (int, string, string) {
	var out, errb bytes.Buffer
	code := run(context.Background(), args, &out, &errb)
	return code, out.String(), errb.String()
}

// TestScoreJSONContract scores a phantom study with decoy series, as a
// folder and as a zip, and checks the result against the phantom's truth
// and the result contract of docs/ARCHITECTURE.md.
func TestScoreJSONContract(t *testing.T) {
	requireORT(t)
	study, truth := phantomStudy(t, phantom.Options{Studies: 1, Seed: 31})
	zipPath := filepath.Join(t.TempDir(), "study.zip")
	zipFolder(t, study, zipPath)
	for _, in := range []string{study, zipPath} {
		code, out, errs := runCLI("score", "--json", in)
		if code != exitOK {
			t.Fatalf("%s: exit %d: %s", in, code, errs)
		}
		var res midsag.Result
		if err := json.Unmarshal([]byte(out), &res); err != nil {
			t.Fatalf("result is not JSON: %v", err)
		}
		if res.Notice != midsag.Notice || res.StudyInstanceUID != truth.StudyInstanceUID ||
			res.SeriesInstanceUID != truth.TargetSeriesUID || res.CenterSOPInstanceUID != truth.CenterSOPInstanceUID {
			t.Errorf("%s: result %+v does not match truth %+v", in, res, truth)
		}
		if len(res.SeriesCandidates) != 5 || len(res.Slices) != truth.Slices {
			t.Errorf("%s: %d candidates, %d slices; want 5 and %d", in, len(res.SeriesCandidates), len(res.Slices), truth.Slices)
		}
		if res.CalibratedProb < 0 || res.CalibratedProb > 1 || res.Model.Name == "" || len(res.Model.SHA256) != 64 || res.ResultID == "" {
			t.Errorf("%s: model fields %+v p=%v", in, res.Model, res.CalibratedProb)
		}
		for _, key := range []string{`"center_sop_instance_uid"`, `"series_candidates"`, `"calibrated_probability"`, `"midline_score"`, `"timings_ms"`} {
			if !strings.Contains(out, key) {
				t.Errorf("%s: output lacks %s", in, key)
			}
		}
	}
}

func zipFolder(t *testing.T, dir, dst string) {
	t.Helper()
	f, err := os.Create(dst)
	if err != nil {
		t.Fatal(err)
	}
	zw := zip.NewWriter(f)
	entries, _ := os.ReadDir(dir)
	for _, e := range entries {
		b, err := os.ReadFile(filepath.Join(dir, e.Name()))
		if err != nil {
			t.Fatal(err)
		}
		w, _ := zw.Create("study/" + e.Name())
		w.Write(b)
	}
	if err := zw.Close(); err != nil {
		t.Fatal(err)
	}
	f.Close()
}

// TestScoreRefusals runs the bad inputs of issue 2 through the CLI: each
// must exit 3 with the right reason code as JSON on stderr.
func TestScoreRefusals(t *testing.T) {
	requireORT(t)
	tmp := t.TempDir()
	study, _ := phantomStudy(t, phantom.Options{Studies: 1, Seed: 32, NoDecoys: true, Syntaxes: []string{midsag.ExplicitVRLittleEndian}})
	files, _ := filepath.Glob(filepath.Join(study, "*"))

	empty := filepath.Join(tmp, "empty")
	os.Mkdir(empty, 0o755)
	gz := filepath.Join(tmp, "study.dcm.gz")
	var gzb bytes.Buffer
	zw := gzip.NewWriter(&gzb)
	zw.Write([]byte("not really dicom"))
	zw.Close()
	os.WriteFile(gz, gzb.Bytes(), 0o644)
	png := filepath.Join(tmp, "image.png")
	os.WriteFile(png, append([]byte("\x89PNG\r\n\x1a\n"), make([]byte, 64)...), 0o644)

	two := filepath.Join(tmp, "two")
	os.Mkdir(two, 0o755)
	for _, f := range files[:2] {
		copyFile(t, f, filepath.Join(two, filepath.Base(f)))
	}
	// DCMTK's dcmodify edits headers: one slice turned axial, and one
	// header claiming 60000 x 60000 pixels.
	mixed := filepath.Join(tmp, "mixed")
	os.Mkdir(mixed, 0o755)
	for _, f := range files {
		copyFile(t, f, filepath.Join(mixed, filepath.Base(f)))
	}
	testtool.Run(t, "dcmodify", "-nb", "-m", `(0020,0037)=1\0\0\0\1\0`, filepath.Join(mixed, filepath.Base(files[0])))
	huge := filepath.Join(tmp, "huge.dcm")
	copyFile(t, files[0], huge)
	testtool.Run(t, "dcmodify", "-nb", "-m", "(0028,0010)=60000", "-m", "(0028,0011)=60000", huge)

	cases := []struct {
		name   string
		args   []string
		reason midsag.Reason
	}{
		{"empty folder", []string{empty}, midsag.ReasonNoInput},
		{"gzip file", []string{gz}, midsag.ReasonNotDICOM},
		{"PNG", []string{png}, midsag.ReasonNotDICOM},
		// pydicom's MR_truncated.dcm ends inside its pixel data.
		{"truncated DICOM", []string{testtool.PydicomFile(t, "MR_truncated.dcm")}, midsag.ReasonTruncated},
		// pydicom's MR_small.dcm is an axial MR slice (Image Orientation 1\0\0\0\1\0).
		{"only axial", []string{testtool.PydicomFile(t, "MR_small.dcm")}, midsag.ReasonNoSagittalT2},
		{"two slices", []string{two}, midsag.ReasonTooFewSlices},
		{"mixed orientations", []string{mixed}, midsag.ReasonInconsistentGeometry},
		{"60000 x 60000", []string{huge}, midsag.ReasonTooLarge},
		// models/testdata/fixed224.onnx takes 1x1x224x224 but its manifest asks for 3 slices.
		{"model input mismatch", []string{"--model", "../../models/testdata/fixed224.onnx", study}, midsag.ReasonModelInputMismatch},
	}
	for _, c := range cases {
		code, out, errs := runCLI(append([]string{"score", "--json"}, c.args...)...)
		if code != exitRejected {
			t.Errorf("%s: exit %d, want 3; stderr %s", c.name, code, errs)
			continue
		}
		if out != "" {
			t.Errorf("%s: stdout not empty: %s", c.name, out)
		}
		var ref midsag.RefusalBody
		if err := json.Unmarshal([]byte(errs), &ref); err != nil {
			t.Errorf("%s: stderr is not JSON: %v: %s", c.name, err, errs)
			continue
		}
		if ref.Error.Reason != c.reason || ref.Notice != midsag.Notice {
			t.Errorf("%s: reason %q (%s), want %q", c.name, ref.Error.Reason, ref.Error.Message, c.reason)
		}
		seriesRefusal := c.reason == midsag.ReasonNoSagittalT2 || c.reason == midsag.ReasonTooFewSlices
		if seriesRefusal && (len(ref.Error.SeriesCandidates) == 0 || len(ref.Error.SeriesCandidates[0].Reasons) == 0) {
			t.Errorf("%s: refusal lists no series candidates with reasons", c.name)
		}
	}
	// Without --json the reason code is still on stderr.
	code, _, errs := runCLI("score", png)
	if code != exitRejected || !strings.Contains(errs, string(midsag.ReasonNotDICOM)) {
		t.Errorf("plain refusal: exit %d, stderr %q", code, errs)
	}
}

func copyFile(t *testing.T, src, dst string) {
	t.Helper()
	b, err := os.ReadFile(src)
	if err != nil {
		t.Fatal(err)
	}
	if err := os.WriteFile(dst, b, 0o644); err != nil {
		t.Fatal(err)
	}
}

func TestScoreUsage(t *testing.T) {
	if code, _, _ := runCLI("score"); code != exitUsage {
		t.Errorf("score without paths: exit %d, want 2", code)
	}
	if code, _, _ := runCLI("score", "--no-such-flag", "x"); code != exitUsage {
		t.Errorf("unknown flag: exit %d, want 2", code)
	}
}

// TestLenientFlag: a study whose files lack the 128-byte preamble and the
// "DICM" prefix (PS3.10 7.1) is refused by score as not_dicom, and scored
// to the phantom's true centre slice with --lenient; serve and batch take
// the same flag through the shared pipeline flags.
func TestLenientFlag(t *testing.T) {
	requireORT(t)
	study, truth := phantomStudy(t, phantom.Options{Studies: 1, Seed: 35, NoDecoys: true})
	bare := t.TempDir()
	files, err := os.ReadDir(study)
	if err != nil {
		t.Fatal(err)
	}
	for _, f := range files {
		b, err := os.ReadFile(filepath.Join(study, f.Name()))
		if err != nil {
			t.Fatal(err)
		}
		if len(b) < 132 || string(b[128:132]) != "DICM" {
			t.Fatalf("%s has no Part 10 preamble", f.Name())
		}
		writeFile(t, filepath.Join(bare, f.Name()), b[132:])
	}
	if code, _, errs := runCLI("score", bare); code != exitRejected || !strings.Contains(errs, "not_dicom") {
		t.Errorf("without --lenient: exit %d, want %d and not_dicom: %s", code, exitRejected, errs)
	}
	code, out, errs := runCLI("score", "--lenient", "--json", bare)
	if code != exitOK {
		t.Fatalf("--lenient: exit %d: %s", code, errs)
	}
	var res midsag.Result
	if err := json.Unmarshal([]byte(out), &res); err != nil {
		t.Fatal(err)
	}
	if res.CenterSOPInstanceUID != truth.CenterSOPInstanceUID {
		t.Errorf("--lenient: centre %s, truth %s", res.CenterSOPInstanceUID, truth.CenterSOPInstanceUID)
	}
	for _, verb := range []string{"serve", "batch"} {
		if _, _, errs := runCLI(verb, "-h"); !strings.Contains(errs, "-lenient") {
			t.Errorf("%s -h lists no --lenient:\n%s", verb, errs)
		}
	}
}
