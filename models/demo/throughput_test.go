package demo

import (
	"bytes"
	"context"
	"encoding/binary"
	"fmt"
	"math/rand/v2"
	"os"
	"testing"

	"github.com/midsag/midsag"
	"github.com/midsag/midsag/models"
)

// BenchmarkModelOnly times a model alone: one Predict per study on a
// batch-of-one stack, with models.Options defaults (all cores for ONNX
// Runtime's intra-op threads, one call at a time). It is the ceiling that
// bench/batch-scale.sh compares `midsag batch` with, reported as studies/h.
//
// By default it runs the embedded demo model on the first item of
// reference-input.f32, a real phantom stack saved by train.py. With
// MIDSAG_BENCH_MODEL=PATH.onnx it runs that model (and its sidecar
// manifest) on a seeded uniform [0,1) stack of the manifest's shape
// instead: a CNN's run time does not depend on pixel values, so either
// stands for every stack of a cohort.
func BenchmarkModelOnly(b *testing.B) {
	lib, err := models.FindLibrary("")
	if err != nil {
		b.Skip(err)
	}
	if err := models.Init(lib); err != nil {
		b.Fatal(err)
	}
	var m *models.Model
	if path := os.Getenv("MIDSAG_BENCH_MODEL"); path != "" {
		m, err = models.Load(path, models.Options{})
	} else {
		m, err = models.LoadBytes(Name, ONNX, nil, models.Options{})
	}
	if err != nil {
		b.Fatal(err)
	}
	defer m.Close()
	in, err := benchInput(m.InputSpec(), os.Getenv("MIDSAG_BENCH_MODEL") == "")
	if err != nil {
		b.Fatal(err)
	}
	ctx := context.Background()
	// One untimed run, so session warm-up is not charged to the first study.
	if _, err := m.Predict(ctx, in); err != nil {
		b.Fatal(err)
	}
	b.ResetTimer()
	for i := 0; i < b.N; i++ {
		if _, err := m.Predict(ctx, in); err != nil {
			b.Fatal(err)
		}
	}
	b.StopTimer()
	b.ReportMetric(float64(b.N)/b.Elapsed().Hours(), "studies/h")
}

// benchInput returns one stack shaped as spec asks: the reference stack
// when reference is set (the demo model), else seeded uniform noise.
func benchInput(spec midsag.InputSpec, reference bool) (*midsag.Tensor, error) {
	c, h, w := int64(spec.Slices), int64(spec.Height), int64(spec.Width)
	shape := []int64{1, c, h, w}
	if spec.Layout == "NHWC" {
		shape = []int64{1, h, w, c}
	}
	data := make([]float32, c*h*w)
	if reference {
		raw, err := os.ReadFile("reference-input.f32")
		if err != nil {
			return nil, err
		}
		if len(raw) < len(data)*4 {
			return nil, fmt.Errorf("reference-input.f32 holds %d bytes, want at least %d", len(raw), len(data)*4)
		}
		if err := binary.Read(bytes.NewReader(raw[:len(data)*4]), binary.LittleEndian, data); err != nil {
			return nil, err
		}
		return &midsag.Tensor{Shape: shape, Data: data}, nil
	}
	r := rand.New(rand.NewPCG(5, 5))
	for i := range data {
		data[i] = r.Float32()
	}
	return &midsag.Tensor{Shape: shape, Data: data}, nil
}
