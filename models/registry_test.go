package models

import (
	"context"
	"os"
	"path/filepath"
	"testing"
	"time"

	"github.com/midsag/midsag"
)

func copyModel(t *testing.T, src, dst string) {
	t.Helper()
	b, err := os.ReadFile(filepath.Join("testdata", src))
	if err != nil {
		t.Fatal(err)
	}
	tmp := dst + ".tmp"
	if err := os.WriteFile(tmp, b, 0o644); err != nil {
		t.Fatal(err)
	}
	if err := os.Rename(tmp, dst); err != nil {
		t.Fatal(err)
	}
}

// TestRegistryReloadKeepsInFlightModels replaces a model file while a
// caller holds the old model: the old one keeps predicting until released,
// new callers get the new file's model, and a removed file's model is
// gone after Reload.
func TestRegistryReloadKeepsInFlightModels(t *testing.T) {
	needORT(t)
	dir := t.TempDir()
	path := filepath.Join(dir, "site.onnx")
	copyModel(t, "tiny_logit.onnx", path)
	def := load(t, "tiny_two.onnx", Options{IntraOpThreads: 1})
	r, err := NewRegistry(def, dir, Options{IntraOpThreads: 1}, nil)
	if err != nil {
		t.Fatal(err)
	}
	defer r.Close()
	if len(r.List()) != 2 || !r.List()[0].Default {
		t.Fatalf("list %+v", r.List())
	}
	old, release, err := r.Acquire("tiny_logit", "")
	if err != nil {
		t.Fatal(err)
	}
	in := &midsag.Tensor{Shape: []int64{1, 3, 32, 32}, Data: make([]float32, 3*32*32)}
	// A different file under the same path: the folder now holds tiny_prob.
	time.Sleep(10 * time.Millisecond)
	copyModel(t, "tiny_prob.onnx", path)
	future := time.Now().Add(time.Second)
	os.Chtimes(path, future, future)
	r.Reload()
	if _, _, err := r.Acquire("tiny_logit", ""); err == nil {
		t.Error("tiny_logit still served after its file was replaced")
	} else if reason, _ := midsag.ReasonOf(err); reason != midsag.ReasonUnknownModel {
		t.Errorf("unknown model: %v", err)
	}
	if _, err := old.Predict(context.Background(), in); err != nil {
		t.Fatalf("in-flight model closed under its caller: %v", err)
	}
	release()
	if _, err := old.Predict(context.Background(), in); err == nil {
		t.Error("retired model still runs after its last release")
	}
	m, rel, err := r.Acquire("tiny_prob", "")
	if err != nil {
		t.Fatal(err)
	}
	rel()
	if m.Info().Name != "tiny_prob" {
		t.Errorf("got %s", m.Info().Name)
	}
	os.Remove(path)
	r.Reload()
	if _, _, err := r.Acquire("tiny_prob", ""); err == nil {
		t.Error("removed model still served")
	}
	d, rel, err := r.Acquire("", "")
	if err != nil || d != def {
		t.Fatalf("default: %v", err)
	}
	rel()
}
