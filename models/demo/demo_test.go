package demo

import (
	"bytes"
	"context"
	"encoding/binary"
	"encoding/json"
	"math"
	"os"
	"testing"

	"github.com/midsag/midsag"
	"github.com/midsag/midsag/internal/testtool"
	"github.com/midsag/midsag/models"
)

// reference is what train.py recorded from PyTorch at export.
type reference struct {
	Shape       []int64   `json:"shape"`
	TorchLogits []float64 `json:"torch_logits"`
	SHA256      string    `json:"sha256"`
}

// TestDemoMatchesTorch runs the embedded model with ONNX Runtime on the
// input train.py saved (reference-input.f32) and compares with the logits
// PyTorch computed for the same input at export (reference.json). Float32
// convolutions summed in a different order differ by a few ulps per layer;
// 1e-4 absolute on logits of order 1-10 allows that and nothing more.
func TestDemoMatchesTorch(t *testing.T) {
	lib, err := models.FindLibrary("")
	if err != nil {
		if testtool.Required() {
			t.Fatal(err)
		}
		t.Skip(err)
	}
	if err := models.Init(lib); err != nil {
		t.Fatal(err)
	}
	var ref reference
	b, err := os.ReadFile("reference.json")
	if err != nil {
		t.Fatal(err)
	}
	if err := json.Unmarshal(b, &ref); err != nil {
		t.Fatal(err)
	}
	raw, err := os.ReadFile("reference-input.f32")
	if err != nil {
		t.Fatal(err)
	}
	data := make([]float32, len(raw)/4)
	if err := binary.Read(bytes.NewReader(raw), binary.LittleEndian, data); err != nil {
		t.Fatal(err)
	}
	m, err := models.LoadBytes(Name, ONNX, nil, models.Options{IntraOpThreads: 1})
	if err != nil {
		t.Fatal(err)
	}
	defer m.Close()
	if m.Info().SHA256 != ref.SHA256 {
		t.Errorf("embedded model sha256 %s, reference.json says %s", m.Info().SHA256, ref.SHA256)
	}
	got, err := m.Predict(context.Background(), &midsag.Tensor{Shape: ref.Shape, Data: data})
	if err != nil {
		t.Fatal(err)
	}
	for i := range ref.TorchLogits {
		if math.Abs(got[i]-ref.TorchLogits[i]) > 1e-4 {
			t.Errorf("item %d: onnxruntime %.6f, torch %.6f", i, got[i], ref.TorchLogits[i])
		}
	}
	if m.Manifest().Calibration.Method != "temperature" {
		t.Errorf("demo manifest calibration %q, want temperature", m.Manifest().Calibration.Method)
	}
}
