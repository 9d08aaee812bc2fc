package pipeline_test

import (
	"bytes"
	"crypto/sha256"
	"fmt"
	"path/filepath"
	"testing"

	"github.com/midsag/midsag"
	"github.com/midsag/midsag/internal/ortest"
	"github.com/midsag/midsag/models/demo"
	"github.com/midsag/midsag/phantom"
	"github.com/midsag/midsag/pipeline"
	"github.com/midsag/midsag/preprocess"
)

// TestNewWiresConfig: the Pipeline New builds carries the bundled demo
// model when no path is given (its sha256, by crypto/sha256, in the model
// info), an explainer only when asked, and a
// preprocessor with the given options: Lenient reads a phantom instance
// stripped of its preamble and "DICM" prefix (PS3.10 7.1), the default
// refuses it as not_dicom.
func TestNewWiresConfig(t *testing.T) {
	ortest.Init(t)
	files, _, err := phantom.GenerateStudy(phantom.Options{Studies: 1, Seed: 5, NoDecoys: true}, 0)
	if err != nil {
		t.Fatal(err)
	}
	bare := files[0].Data[132:]
	for _, lenient := range []bool{false, true} {
		p, m, err := pipeline.New(pipeline.Config{Preprocess: preprocess.Options{Lenient: lenient}, Explain: lenient})
		if err != nil {
			t.Fatal(err)
		}
		if got, want := p.Model.Info().SHA256, fmt.Sprintf("%x", sha256.Sum256(demo.ONNX)); got != want {
			t.Errorf("model sha256 %s, want the bundled %s's %s", got, demo.Name, want)
		}
		if (p.Explainer != nil) != lenient {
			t.Errorf("Explain %v: explainer %v", lenient, p.Explainer)
		}
		_, err = p.Pre.Read("bare", bytes.NewReader(bare))
		if r, _ := midsag.ReasonOf(err); lenient && err != nil || !lenient && r != midsag.ReasonNotDICOM {
			t.Errorf("Lenient %v: reading without the preamble: %v", lenient, err)
		}
		m.Close()
	}
	if _, _, err := pipeline.New(pipeline.Config{Model: pipeline.ModelConfig{Path: filepath.Join(t.TempDir(), "missing.onnx")}}); err == nil {
		t.Error("a missing model file loaded")
	}
}
