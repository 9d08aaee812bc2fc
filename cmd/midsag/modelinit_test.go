package main

import (
	"os"
	"path/filepath"
	"strings"
	"testing"

	"github.com/midsag/midsag/models"
)

// copyModel copies a manifest-less test model of models/testdata
// (make_init_models.py, exported by PyTorch) into a temporary folder.
func copyModel(t *testing.T, name string) string {
	t.Helper()
	b, err := os.ReadFile(filepath.Join("../../models/testdata", name))
	if err != nil {
		t.Fatal(err)
	}
	p := filepath.Join(t.TempDir(), name)
	if err := os.WriteFile(p, b, 0o644); err != nil {
		t.Fatal(err)
	}
	return p
}

// TestModelInitThenInspect is the new user's path: inspect says which
// init command fits, init writes the manifest, inspect then passes.
func TestModelInitThenInspect(t *testing.T) {
	requireORT(t)
	p := copyModel(t, "init_five.onnx")
	code, out, _ := runCLI("model", "inspect", p)
	if code != exitRejected || !strings.Contains(out, "midsag model init "+p+" --layout NCHW --slices 5") {
		t.Fatalf("inspect before init: exit %d\n%s", code, out)
	}
	code, out, errs := runCLI("model", "init", p, "--normalize", "meanstd", "--mean", "0.2", "--std", "0.3", "--labels", "no_compression,compression")
	if code != exitOK {
		t.Fatalf("init: exit %d, stderr %s", code, errs)
	}
	side := models.SidecarPath(p)
	if !strings.Contains(out, "wrote "+side) {
		t.Errorf("init output:\n%s", out)
	}
	man, err := os.ReadFile(side)
	if err != nil {
		t.Fatal(err)
	}
	m, err := models.ParseManifest(man)
	if err != nil || m.Input.Slices != 5 || len(m.Input.Mean) != 5 || m.Output.Kind != "logit" {
		t.Fatalf("manifest %s: %v", man, err)
	}
	if code, out, errs := runCLI("model", "inspect", p); code != exitOK || !strings.Contains(out, "loads and matches the manifest") {
		t.Errorf("inspect after init: exit %d\n%s%s", code, out, errs)
	}
	if code, _, errs := runCLI("model", "init", p); code != exitUsage || !strings.Contains(errs, "pass --force") {
		t.Errorf("second init: exit %d, %s", code, errs)
	}
}

// TestModelInitRefusesWithoutWriting: a manifest that cannot fit is
// refused with the reason and nothing is written.
func TestModelInitRefusesWithoutWriting(t *testing.T) {
	requireORT(t)
	p := copyModel(t, "init_softmax.onnx")
	for _, c := range []struct {
		args []string
		code int
		want string
	}{
		{[]string{"--output-kind", "logit"}, exitRejected, "--output-kind logit needs an [N,1] output"},
		{[]string{"--normalize", "meanstd"}, exitRejected, "input.mean and input.std need one value per slice (3)"},
		{[]string{"--percentiles", "5"}, exitUsage, "--percentiles wants low,high"},
		{[]string{"--slices", "5"}, exitRejected, "model_input_mismatch"},
	} {
		code, _, errs := runCLI(append([]string{"model", "init", p}, c.args...)...)
		if code != c.code || !strings.Contains(errs, c.want) {
			t.Errorf("%q: exit %d, stderr %q; want %d and %q", c.args, code, errs, c.code, c.want)
		}
		if _, err := os.Stat(models.SidecarPath(p)); err == nil {
			t.Fatalf("%q wrote a manifest", c.args)
		}
	}
	if code, _, errs := runCLI("model", "init", p, "--output-kind", "logits"); code != exitOK || !strings.Contains(errs, "computed by Softmax") {
		t.Errorf("contradicted kind: exit %d, stderr %q; want a warning", code, errs)
	}
}
