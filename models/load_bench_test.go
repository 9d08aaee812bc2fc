package models

import (
	"crypto/sha256"
	"os"
	"path/filepath"
	"runtime"
	"testing"

	ort "github.com/yalue/onnxruntime_go"
)

// benchModel is the model BenchmarkLoad loads: $MIDSAG_BENCH_MODEL (for
// example a ResNet-50 exported at 3x512x512 with a sidecar manifest, see
// DEVELOPERS.md), else the tiny test model.
func benchModel() string {
	if p := os.Getenv("MIDSAG_BENCH_MODEL"); p != "" {
		return p
	}
	return filepath.Join("testdata", "tiny_logit.onnx")
}

// BenchmarkLoad compares Load (one ONNX Runtime session, inputs and
// outputs read from the protobuf, sha256 taken while reading) with the
// earlier path measured in the same run: a temporary session for the
// input/output info, then the real one, then a second pass to hash.
// Read the result as the ratio of the two ns/op figures.
func BenchmarkLoad(b *testing.B) {
	needORT(b)
	path := benchModel()
	b.Run("before_two_sessions", func(b *testing.B) {
		for i := 0; i < b.N; i++ {
			loadTwoSessions(b, path)
		}
	})
	b.Run("one_session", func(b *testing.B) {
		for i := 0; i < b.N; i++ {
			m, err := Load(path, Options{})
			if err != nil {
				b.Fatal(err)
			}
			_ = m.Close()
		}
	})
}

// loadTwoSessions is the load path before this change, kept here only as
// the benchmark's baseline.
func loadTwoSessions(b *testing.B, path string) {
	data, err := os.ReadFile(path)
	if err != nil {
		b.Fatal(err)
	}
	sidecar, err := readSidecar(path)
	if err != nil {
		b.Fatal(err)
	}
	man, err := ParseManifest(sidecar)
	if sidecar == nil {
		man, err = ReadManifest(data)
	}
	if err != nil {
		b.Fatal(err)
	}
	if _, _, err := ort.GetInputOutputInfoWithONNXData(data); err != nil {
		b.Fatal(err)
	}
	so, err := ort.NewSessionOptions()
	if err != nil {
		b.Fatal(err)
	}
	defer so.Destroy()
	if so.SetIntraOpNumThreads(runtime.NumCPU()) != nil || so.SetInterOpNumThreads(1) != nil {
		b.Fatal("set threads")
	}
	s, err := ort.NewDynamicAdvancedSessionWithONNXData(data, []string{man.Input.Name}, []string{man.Output.Name}, so)
	if err != nil {
		b.Fatal(err)
	}
	_ = sha256.Sum256(data)
	_ = s.Destroy()
}
