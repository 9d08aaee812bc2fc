package models

import (
	"context"
	"encoding/json"
	"math"
	"os"
	"path/filepath"
	"strings"
	"testing"

	"github.com/midsag/midsag"
)

// initReference is testdata/init_reference.json, PyTorch 1.13's outputs
// for the manifest-less models of make_init_models.py.
type initReference struct {
	Models map[string]struct {
		InputShape []int64     `json:"input_shape"`
		Output     [][]float64 `json:"output"`
	} `json:"models"`
}

// TestInitManifestMatchesPyTorch builds each manifest the way "model init"
// does, from the model's own declarations and the flags a user would
// give, runs the model with ONNX Runtime and compares the probability
// Interpret reads with the one torch computed (torch is the reference).
func TestInitManifestMatchesPyTorch(t *testing.T) {
	needORT(t)
	var ref initReference
	readJSON(t, "testdata/init_reference.json", &ref)
	cases := []struct {
		file   string
		opts   InitOptions
		layout string
		slices int
		// prob turns torch's output row into the positive probability.
		prob func(row []float64) float64
	}{
		{"tiny_logit.onnx", InitOptions{PositiveIndex: -1}, "NCHW", 3, func(r []float64) float64 { return Sigmoid(r[0]) }},
		{"init_softmax.onnx", InitOptions{PositiveIndex: -1}, "NCHW", 3, func(r []float64) float64 { return r[1] }},
		{"init_softmax.onnx", InitOptions{PositiveIndex: 0, OutputKind: InitSoftmax}, "NCHW", 3, func(r []float64) float64 { return r[0] }},
		{"tiny_two.onnx", InitOptions{PositiveIndex: -1}, "NCHW", 3, func(r []float64) float64 { return Sigmoid(r[1] - r[0]) }},
		{"tiny_prob.onnx", InitOptions{PositiveIndex: -1}, "NCHW", 3, func(r []float64) float64 { return r[0] }},
		{"init_nhwc.onnx", InitOptions{PositiveIndex: -1}, "NHWC", 3, func(r []float64) float64 { return Sigmoid(r[0]) }},
		{"init_five.onnx", InitOptions{PositiveIndex: -1, Normalize: "meanstd", Mean: []float64{0.2}, Std: []float64{0.3}}, "NCHW", 5, func(r []float64) float64 { return Sigmoid(r[0]) }},
	}
	old := loadReference(t)
	for _, c := range cases {
		t.Run(c.file, func(t *testing.T) {
			onnx, err := os.ReadFile(filepath.Join("testdata", c.file))
			if err != nil {
				t.Fatal(err)
			}
			man, _, err := InitManifest(c.file, onnx, c.opts)
			if err != nil {
				t.Fatal(err)
			}
			if man.Input.Layout != c.layout || man.Input.Slices != c.slices || man.Input.Height != 32 {
				t.Fatalf("inferred input %+v, want %s with %d slices of 32x32", man.Input, c.layout, c.slices)
			}
			js, err := json.Marshal(man)
			if err != nil {
				t.Fatal(err)
			}
			m, err := LoadBytes(c.file, onnx, js, Options{})
			if err != nil {
				t.Fatal(err)
			}
			defer m.Close()
			shape, want := ref.Models[c.file].InputShape, ref.Models[c.file].Output
			if shape == nil {
				shape, want = old.Models[c.file].InputShape, old.Models[c.file].Output
			}
			raw, err := m.Predict(context.Background(), refInput(shape))
			if err != nil {
				t.Fatal(err)
			}
			for i, row := range want {
				got := m.Interpret(raw[i]).Probability
				if math.Abs(got-c.prob(row)) > torchTol {
					t.Errorf("item %d: midsag %.8f, torch %.8f", i, got, c.prob(row))
				}
			}
		})
	}
}

// TestInitManifestErrors checks that what the model cannot answer, or a
// flag that contradicts it, is refused in words naming the fix.
func TestInitManifestErrors(t *testing.T) {
	cases := []struct {
		file string
		opts InitOptions
		want string
	}{
		{"init_softmax.onnx", InitOptions{OutputKind: InitLogit}, "--output-kind logit needs an [N,1] output"},
		{"tiny_logit.onnx", InitOptions{OutputKind: "sigmoid"}, "want logit, probability, softmax or logits"},
		{"tiny_logit.onnx", InitOptions{Output: "prob"}, `model has no output "prob"; its outputs are "logit"`},
		{"tiny_logit.onnx", InitOptions{Normalize: "meanstd"}, "input.mean and input.std need one value per slice"},
		{"init_five.onnx", InitOptions{Normalize: "meanstd", Mean: []float64{0.1, 0.2, 0.3}, Std: []float64{0.1}}, "one value per slice (5), got 3 and 5"},
	}
	for _, c := range cases {
		onnx, err := os.ReadFile(filepath.Join("testdata", c.file))
		if err != nil {
			t.Fatal(err)
		}
		_, _, err = InitManifest(c.file, onnx, c.opts)
		if r, _ := midsag.ReasonOf(err); r != midsag.ReasonBadModel || !strings.Contains(err.Error(), c.want) {
			t.Errorf("%s %+v: got %v, want bad_model with %q", c.file, c.opts, err, c.want)
		}
	}
}

// TestInitWarnsOnContradictedKind: a softmax output declared as logits
// would be silently misread, so InitManifest warns.
func TestInitWarnsOnContradictedKind(t *testing.T) {
	onnx, err := os.ReadFile("testdata/init_softmax.onnx")
	if err != nil {
		t.Fatal(err)
	}
	_, warn, err := InitManifest("m", onnx, InitOptions{OutputKind: InitLogits, PositiveIndex: -1})
	if err != nil || len(warn) != 1 || !strings.Contains(warn[0], "computed by Softmax") {
		t.Errorf("warnings %q, err %v", warn, err)
	}
}

// TestLoadNamesMissingManifestFix: a model with no manifest is refused
// with the command that writes one.
func TestLoadNamesMissingManifestFix(t *testing.T) {
	needORT(t)
	_, err := Load("testdata/init_five.onnx", Options{})
	if r, _ := midsag.ReasonOf(err); r != midsag.ReasonBadModel || !strings.Contains(err.Error(), "midsag model init") {
		t.Errorf("got %v", err)
	}
	ins, err := Inspect("testdata/init_five.onnx")
	if err != nil {
		t.Fatal(err)
	}
	want := "midsag model init testdata/init_five.onnx --layout NCHW --slices 5 --height 32 --width 32 --normalize percentile --output-kind logit"
	if ins.InitCommand != want {
		t.Errorf("init command %q, want %q", ins.InitCommand, want)
	}
}

// TestLoadRefusesManifestOutputTheModelLacks: a manifest naming an output
// the model does not have is a bad model (no study could be scored with
// it), with the model's outputs listed, not model_input_mismatch.
func TestLoadRefusesManifestOutputTheModelLacks(t *testing.T) {
	needORT(t)
	onnx, err := os.ReadFile("testdata/init_five.onnx")
	if err != nil {
		t.Fatal(err)
	}
	man, _, err := InitManifest("m", onnx, InitOptions{PositiveIndex: -1})
	if err != nil {
		t.Fatal(err)
	}
	man.Output.Name = "score"
	js, _ := json.Marshal(man)
	_, err = LoadBytes("m", onnx, js, Options{})
	if r, _ := midsag.ReasonOf(err); r != midsag.ReasonBadModel || !strings.Contains(err.Error(), `its outputs are "logit"`) {
		t.Errorf("got %v", err)
	}
}
