package main

import (
	"bytes"
	"encoding/json"
	"image/png"
	"os"
	"path/filepath"
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
