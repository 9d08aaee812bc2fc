package main

import (
	"bytes"
	"encoding/json"
	"image/png"
	"os"
	"path/filepath"
	"strings"
	"testing"

	"github.com/midsag/midsag"
	"github.com/midsag/midsag/phantom"
)

// TestScoreExplain runs `score --explain --out` on a phantom study with
// cord compression, in the default sparse mode and the exhaustive one,
// and checks the explanation contract of the README: the 16 x 16 grid,
// the run count (at most 64 in the default mode, the unoccluded run
// included), a peak, heatmap.png and heatmap.dcm.
func TestScoreExplain(t *testing.T) {
	requireORT(t)
	study, _ := phantomStudy(t, phantom.Options{Studies: 1, Seed: 4242, CompressionRate: 1})
	for _, c := range []struct {
		args    []string
		method  string
		maxRuns int
	}{
		{nil, "occlusion_sparse", 64},
		{[]string{"--explain-mode", "exhaustive", "--explain-baseline", "blur"}, "occlusion", 257},
	} {
		out := t.TempDir()
		args := append([]string{"score", "--json", "--explain", "--out", out}, c.args...)
		code, stdout, stderr := runCLI(append(args, study)...)
		if code != exitOK {
			t.Fatalf("%v: exit %d: %s", c.args, code, stderr)
		}
		var res midsag.Result
		if err := json.Unmarshal([]byte(stdout), &res); err != nil {
			t.Fatal(err)
		}
		e := res.Explanation
		if e == nil {
			t.Fatalf("%v: no explanation in %s", c.args, stdout)
		}
		if e.Method != c.method || e.GridRows != 16 || e.GridCols != 16 || len(e.Values) != 256 || len(e.RawValues) != 256 {
			t.Errorf("%v: method %q grid %dx%d, %d values", c.args, e.Method, e.GridRows, e.GridCols, len(e.Values))
		}
		if e.ModelRuns < 2 || e.ModelRuns > c.maxRuns {
			t.Errorf("%v: %d model runs, want 2..%d", c.args, e.ModelRuns, c.maxRuns)
		}
		if e.PeakPatientMM == [3]float64{} {
			t.Errorf("%v: no peak in patient coordinates", c.args)
		}
		b, err := os.ReadFile(filepath.Join(out, "heatmap.png"))
		if err != nil {
			t.Fatal(err)
		}
		if _, err := png.Decode(bytes.NewReader(b)); err != nil {
			t.Errorf("%v: heatmap.png: %v", c.args, err)
		}
		dcm, err := os.ReadFile(filepath.Join(out, "heatmap.dcm"))
		if err != nil || len(dcm) < 132 || string(dcm[128:132]) != "DICM" {
			t.Errorf("%v: heatmap.dcm is not a DICOM file (%v)", c.args, err)
		}
	}
}

// TestScoreExplainSummary: without --json the summary names the map's
// method, its run count and its peak.
func TestScoreExplainSummary(t *testing.T) {
	requireORT(t)
	study, _ := phantomStudy(t, phantom.Options{Studies: 1, Seed: 4242, CompressionRate: 1})
	code, stdout, stderr := runCLI("score", "--explain", study)
	if code != exitOK {
		t.Fatalf("exit %d: %s", code, stderr)
	}
	if !strings.Contains(stdout, "map          occlusion_sparse, mean baseline, ") || !strings.Contains(stdout, "model runs; peak at row ") ||
		!strings.Contains(stdout, midsag.Notice) {
		t.Errorf("summary lacks the map line or the notice:\n%s", stdout)
	}
}

// TestScoreExplainUsage: bad explanation flags are usage errors.
func TestScoreExplainUsage(t *testing.T) {
	for _, args := range [][]string{
		{"--explain-mode", "everything"},
		{"--explain-baseline", "noise"},
		{"--explain-max-runs", "-5"},
	} {
		code, _, stderr := runCLI(append(append([]string{"score", "--explain"}, args...), "x")...)
		if code != exitUsage {
			t.Errorf("%v: exit %d, want 2 (%s)", args, code, stderr)
		}
	}
}

// TestBatchExplain: `batch --explain` writes result.json, heatmap.png and
// heatmap.dcm per study scored, under OUT/maps/STUDY_UID, and a rerun
// with nothing to score writes none again.
func TestBatchExplain(t *testing.T) {
	requireORT(t)
	root := t.TempDir()
	truths, err := phantom.Generate(root, phantom.Options{Studies: 3, Seed: 77, NoDecoys: true})
	if err != nil {
		t.Fatal(err)
	}
	out := t.TempDir()
	if code, _, stderr := runCLI("batch", "--explain", "--workers", "1", "--out", out, root); code != exitOK {
		t.Fatalf("batch --explain: exit %d: %s", code, stderr)
	}
	for _, tr := range truths {
		dir := filepath.Join(out, "maps", tr.StudyInstanceUID)
		var res midsag.Result
		b, err := os.ReadFile(filepath.Join(dir, "result.json"))
		if err != nil {
			t.Fatal(err)
		}
		if err := json.Unmarshal(b, &res); err != nil || res.Explanation == nil || res.Explanation.ModelRuns > 64 ||
			res.StudyInstanceUID != tr.StudyInstanceUID || res.Notice != midsag.Notice {
			t.Errorf("%s: result.json %v, explanation %+v", tr.Study, err, res.Explanation)
		}
		for _, f := range []string{"heatmap.png", "heatmap.dcm"} {
			if st, err := os.Stat(filepath.Join(dir, f)); err != nil || st.Size() == 0 {
				t.Errorf("%s: %s: %v", tr.Study, f, err)
			}
		}
	}
	before, _ := os.Stat(filepath.Join(out, "maps", truths[0].StudyInstanceUID, "heatmap.png"))
	if code, _, stderr := runCLI("batch", "--explain", "--out", out, root); code != exitOK {
		t.Fatalf("rerun: exit %d: %s", code, stderr)
	}
	after, _ := os.Stat(filepath.Join(out, "maps", truths[0].StudyInstanceUID, "heatmap.png"))
	if !after.ModTime().Equal(before.ModTime()) {
		t.Errorf("a rerun with nothing to score rewrote a map")
	}
}

// TestValidUID: map folders are named by the Study Instance UID only
// when it is a valid UID (PS3.5 9.1), never by a path.
func TestValidUID(t *testing.T) {
	for s, want := range map[string]bool{
		"1.2.840.10008.1.1": true, "2.25.1": true, "": false, "../etc": false, "1.2/3": false,
		".1.2": false, "1.2.": false, "1.2.3a": false, strings.Repeat("1", 65): false,
	} {
		if validUID(s) != want {
			t.Errorf("validUID(%q) = %v, want %v", s, !want, want)
		}
	}
}

// TestBatchRetriesFailedStudies: when a study's outputs cannot be written
// (OUT/maps is a file), its row is failed with reason error and the
// message; a rerun once the cause is gone scores it again, while scored
// studies are not redone.
func TestBatchRetriesFailedStudies(t *testing.T) {
	requireORT(t)
	root := t.TempDir()
	if _, err := phantom.Generate(root, phantom.Options{Studies: 2, Seed: 78, NoDecoys: true}); err != nil {
		t.Fatal(err)
	}
	out := t.TempDir()
	blocker := filepath.Join(out, "maps")
	if err := os.WriteFile(blocker, []byte("not a folder"), 0o644); err != nil {
		t.Fatal(err)
	}
	if code, _, stderr := runCLI("batch", "--explain", "--workers", "1", "--out", out, root); code != exitOK {
		t.Fatalf("batch: exit %d: %s", code, stderr)
	}
	rows := batchRows(t, filepath.Join(out, "results.csv"), 2)
	for _, r := range rows {
		if r["status"] != "failed" || r["reason"] != "error" || !strings.Contains(r["message"], "write the study's outputs") {
			t.Errorf("row %v: want failed, error, and the cause in the message", r)
		}
	}
	if err := os.Remove(blocker); err != nil {
		t.Fatal(err)
	}
	if code, _, stderr := runCLI("batch", "--explain", "--workers", "1", "--out", out, root); code != exitOK {
		t.Fatalf("rerun: exit %d: %s", code, stderr)
	}
	for _, r := range batchRows(t, filepath.Join(out, "results.csv"), 2) {
		if r["status"] != "scored" {
			t.Errorf("rerun row %v: want scored", r)
		}
	}
	code, stdout, stderr := runCLI("batch", "--explain", "--out", out, root)
	if code != exitOK || !strings.Contains(stderr+stdout, "0 to score, 2 already done") {
		t.Errorf("second rerun: exit %d, want nothing to score:\n%s%s", code, stdout, stderr)
	}
}

// batchRows reads a batch table as one map per row, column name to value,
// and fails unless it holds n rows.
func batchRows(t *testing.T, path string, n int) []map[string]string {
	t.Helper()
	head, rows := readTable(t, path)
	if len(rows) != n {
		t.Fatalf("%s: %d rows, want %d", path, len(rows), n)
	}
	out := make([]map[string]string, len(rows))
	for i, r := range rows {
		out[i] = map[string]string{}
		for j, h := range head {
			out[i][h] = r[j]
		}
	}
	return out
}
