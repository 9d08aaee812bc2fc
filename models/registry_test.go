package models

import (
	"context"
	"encoding/json"
	"log/slog"
	"os"
	"path/filepath"
	"strings"
	"sync"
	"testing"
	"time"

	"github.com/midsag/midsag"
	"github.com/midsag/midsag/internal/testtool"
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

// TestCompareVersions: dotted numbers compare numerically part by part,
// as in the precedence rule of Semantic Versioning 2.0.0 (item 11), so
// "10" is newer than "9"; non-numeric parts compare as strings.
func TestCompareVersions(t *testing.T) {
	for _, c := range []struct {
		a, b string
		want int
	}{
		{"9", "10", -1},
		{"1.9", "1.10", -1},
		{"1.2", "1.2.1", -1},
		{"v2", "2", 0},
		{"2.0", "2.0", 0},
		{"1.10.0", "1.9.9", 1},
		{"beta", "alpha", 1},
		{"2026-01", "2025-12", 1},
	} {
		if got := compareVersions(c.a, c.b); got != c.want {
			t.Errorf("compareVersions(%q, %q) = %d, want %d", c.a, c.b, got, c.want)
		}
		if got := compareVersions(c.b, c.a); got != -c.want {
			t.Errorf("compareVersions(%q, %q) = %d, want %d", c.b, c.a, got, -c.want)
		}
	}
}

// writeVersion copies a test model to dir/file with a sidecar manifest
// naming it name at version.
func writeVersion(t *testing.T, dir, file, name, version string) {
	t.Helper()
	path := filepath.Join(dir, file)
	copyModel(t, "tiny_logit.onnx", path)
	m := load(t, "tiny_logit.onnx", Options{IntraOpThreads: 1})
	man := *m.Manifest()
	m.Close()
	man.Name, man.Version = name, version
	b, err := json.Marshal(man)
	if err != nil {
		t.Fatal(err)
	}
	if err := os.WriteFile(SidecarPath(path), b, 0o644); err != nil {
		t.Fatal(err)
	}
}

// TestRegistryVersionOrder: with versions 10, 9 and 2 of one name in
// files whose names sort the other way, the newest is 10 (not "9", the
// largest as a string), List gives 2, 9, 10 after the default, and a
// named version is found exactly.
func TestRegistryVersionOrder(t *testing.T) {
	needORT(t)
	dir := t.TempDir()
	writeVersion(t, dir, "a.onnx", "site", "10")
	writeVersion(t, dir, "b.onnx", "site", "9")
	writeVersion(t, dir, "c.onnx", "site", "2")
	r, err := NewRegistry(load(t, "tiny_two.onnx", Options{IntraOpThreads: 1}), dir, Options{IntraOpThreads: 1}, nil)
	if err != nil {
		t.Fatal(err)
	}
	defer r.Close()
	var got []string
	for _, e := range r.List()[1:] {
		got = append(got, e.Info.Version)
	}
	if strings.Join(got, ",") != "2,9,10" {
		t.Errorf("listed versions %v, want 2,9,10", got)
	}
	for _, c := range []struct{ version, want string }{{"", "10"}, {"9", "9"}, {"2", "2"}} {
		m, release, err := r.Acquire("site", c.version)
		if err != nil {
			t.Fatal(err)
		}
		if v := m.Info().Version; v != c.want {
			t.Errorf("Acquire(site, %q) = version %s, want %s", c.version, v, c.want)
		}
		release()
	}
}

// TestRegistryConcurrentReload: Reload calls at once (a SIGHUP while the
// folder watch ticks) load a changed file once, leave one entry for it
// and serve the new version; run with -race.
func TestRegistryConcurrentReload(t *testing.T) {
	needORT(t)
	dir := t.TempDir()
	writeVersion(t, dir, "site.onnx", "site", "1")
	var log testtool.Buffer
	r, err := NewRegistry(load(t, "tiny_two.onnx", Options{IntraOpThreads: 1}), dir, Options{IntraOpThreads: 1},
		slog.New(slog.NewTextHandler(&log, nil)))
	if err != nil {
		t.Fatal(err)
	}
	defer r.Close()
	writeVersion(t, dir, "site.onnx", "site", "2")
	future := time.Now().Add(time.Second)
	os.Chtimes(SidecarPath(filepath.Join(dir, "site.onnx")), future, future)
	var wg sync.WaitGroup
	for range 4 {
		wg.Add(1)
		go func() { defer wg.Done(); r.Reload() }()
	}
	wg.Wait()
	if n := strings.Count(log.String(), "model loaded"); n != 2 {
		t.Errorf("%d loads logged, want 2 (version 1 at start, version 2 once):\n%s", n, log.String())
	}
	if l := r.List(); len(l) != 2 || l[1].Info.Version != "2" {
		t.Errorf("list %+v, want the default and site version 2", l)
	}
}
