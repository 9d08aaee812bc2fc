package explain

import (
	"context"
	"encoding/binary"
	"math"
	"math/rand/v2"
	"os"
	"path/filepath"
	"testing"

	"github.com/midsag/midsag"
	"github.com/midsag/midsag/internal/ortest"
	"github.com/midsag/midsag/models"
)

// needORT initialises ONNX Runtime or skips the test.
func needORT(t testing.TB) { ortest.Init(t) }

func loadModel(t testing.TB, path string) *models.Model {
	t.Helper()
	m, err := models.Load(path, models.Options{IntraOpThreads: 1})
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() { m.Close() })
	return m
}

// linearWeights reads the weights and bias torch wrote for linear.onnx.
func linearWeights(t *testing.T) ([]float32, float32) {
	t.Helper()
	b, err := os.ReadFile(filepath.Join("testdata", "linear-weights.f32"))
	if err != nil {
		t.Fatal(err)
	}
	v := make([]float32, len(b)/4)
	for i := range v {
		v[i] = math.Float32frombits(binary.LittleEndian.Uint32(b[4*i:]))
	}
	return v[:len(v)-1], v[len(v)-1]
}

// randomInput is a [1,3,h,w] input in [0,1) with its left quarter zero
// (air), from a fixed seed.
func randomInput(h, w int) *midsag.Tensor {
	r := rand.New(rand.NewPCG(7, 11))
	d := make([]float32, 3*h*w)
	for c := 0; c < 3; c++ {
		for y := 0; y < h; y++ {
			for x := w / 4; x < w; x++ {
				d[(c*h+y)*w+x] = r.Float32()
			}
		}
	}
	return &midsag.Tensor{Shape: []int64{1, 3, int64(h), int64(w)}, Data: d}
}

func predictOne(t testing.TB, m midsag.Model, in *midsag.Tensor) float64 {
	t.Helper()
	out, err := m.Predict(context.Background(), in)
	if err != nil {
		t.Fatal(err)
	}
	return out[0]
}
