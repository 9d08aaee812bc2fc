package models

import (
	"context"
	"encoding/json"
	"errors"
	"math"
	"os"
	"os/exec"
	"path/filepath"
	"strings"
	"sync"
	"testing"

	"github.com/midsag/midsag"
)

// reference is testdata/reference.json, written by testdata/make_models.py
// from PyTorch 1.13 and the onnx 1.12 Python package: the outside
// reference these tests compare against.
type reference struct {
	Models map[string]struct {
		IRVersion    int64            `json:"ir_version"`
		ProducerName string           `json:"producer_name"`
		Opset        map[string]int64 `json:"opset"`
		OpCounts     map[string]int   `json:"op_counts"`
		Nodes        int              `json:"nodes"`
		InputShape   []int64          `json:"input_shape"`
		Output       [][]float64      `json:"output"`
	} `json:"models"`
}

func loadReference(t *testing.T) reference {
	t.Helper()
	var r reference
	readJSON(t, "testdata/reference.json", &r)
	return r
}

// readJSON decodes the JSON file at path into v or fails t.
func readJSON(t *testing.T, path string, v any) {
	t.Helper()
	b, err := os.ReadFile(path)
	if err != nil {
		t.Fatal(err)
	}
	if err := json.Unmarshal(b, v); err != nil {
		t.Fatalf("%s: %v", path, err)
	}
}

// refInput rebuilds the input make_models.py fed to torch:
// x[i] = float32(sin(0.05 i)) over the flattened tensor.
func refInput(shape []int64) *midsag.Tensor {
	n := int64(1)
	for _, d := range shape {
		n *= d
	}
	data := make([]float32, n)
	for i := range data {
		data[i] = float32(math.Sin(0.05 * float64(i)))
	}
	return &midsag.Tensor{Shape: append([]int64(nil), shape...), Data: data}
}

// needORT initialises ONNX Runtime or skips the test when the library is
// missing, unless MIDSAG_REQUIRE_TOOLS=1 makes that a failure.
func needORT(t testing.TB) {
	t.Helper()
	lib, err := FindLibrary("")
	if err == nil {
		err = Init(lib)
	}
	if err != nil {
		if os.Getenv("MIDSAG_REQUIRE_TOOLS") == "1" {
			t.Fatalf("ONNX Runtime required: %v", err)
		}
		t.Skipf("ONNX Runtime not available: %v", err)
	}
}

func load(t *testing.T, name string, opts Options) *Model {
	t.Helper()
	m, err := Load(filepath.Join("testdata", name), opts)
	if err != nil {
		t.Fatalf("Load %s: %v", name, err)
	}
	t.Cleanup(func() { _ = m.Close() })
	return m
}

// torchTol is the agreement asked of ONNX Runtime and PyTorch in float32:
// both sum the same few thousand products in different orders, which moves
// results by a few float32 ulps (~1e-7 at these magnitudes); 1e-5 leaves
// wide room for that yet is ~100 times smaller than the spread between the
// four reference items (~4e-3), so a swapped item, layout or class column
// fails.
const torchTol = 1e-5

// torchRaw is the raw output Predict should give for a reference row: the
// value itself, or for two logits the positive minus the negative.
func torchRaw(row []float64, positive int) float64 {
	if len(row) == 1 {
		return row[0]
	}
	return row[positive] - row[1-positive]
}

func TestPredictMatchesPyTorch(t *testing.T) {
	needORT(t)
	ref := loadReference(t)
	for _, name := range []string{"tiny_logit.onnx", "tiny_two.onnx", "tiny_prob.onnx", "tiny_batch1.onnx"} {
		t.Run(name, func(t *testing.T) {
			r := ref.Models[name]
			m := load(t, name, Options{})
			got, err := m.Predict(context.Background(), refInput(r.InputShape))
			if err != nil {
				t.Fatal(err)
			}
			if len(got) != len(r.Output) {
				t.Fatalf("got %d outputs, torch gave %d", len(got), len(r.Output))
			}
			for i, row := range r.Output {
				want := torchRaw(row, m.Manifest().Output.PositiveIndex)
				if math.Abs(got[i]-want) > torchTol {
					t.Errorf("item %d: onnxruntime %.8f, torch %.8f", i, got[i], want)
				}
			}
		})
	}
}

// TestInterpretTwoLogitsIsSoftmax checks the documented equivalence for
// [N,2] logit outputs: sigmoid(z1 - z0) equals softmax(z)[1], computed here
// from torch's recorded logits with the softmax formula.
func TestInterpretTwoLogitsIsSoftmax(t *testing.T) {
	needORT(t)
	r := loadReference(t).Models["tiny_two.onnx"]
	m := load(t, "tiny_two.onnx", Options{})
	got, err := m.Predict(context.Background(), refInput(r.InputShape))
	if err != nil {
		t.Fatal(err)
	}
	for i, z := range r.Output {
		softmax1 := math.Exp(z[1]) / (math.Exp(z[0]) + math.Exp(z[1]))
		if p := m.Interpret(got[i]).Probability; math.Abs(p-softmax1) > torchTol {
			t.Errorf("item %d: probability %.8f, softmax of torch logits %.8f", i, p, softmax1)
		}
	}
}

func TestBatchEqualsSingleRuns(t *testing.T) {
	needORT(t)
	r := loadReference(t).Models["tiny_logit.onnx"]
	m := load(t, "tiny_logit.onnx", Options{})
	in := refInput(r.InputShape)
	batch, err := m.Predict(context.Background(), in)
	if err != nil {
		t.Fatal(err)
	}
	per := len(in.Data) / 4
	for i := 0; i < 4; i++ {
		one := &midsag.Tensor{Shape: []int64{1, 3, 32, 32}, Data: in.Data[i*per : (i+1)*per]}
		got, err := m.Predict(context.Background(), one)
		if err != nil {
			t.Fatal(err)
		}
		// Each single run is also held to torch's value for that item.
		if math.Abs(got[0]-batch[i]) > torchTol || math.Abs(got[0]-r.Output[i][0]) > torchTol {
			t.Errorf("item %d: single %.8f, in batch %.8f, torch %.8f", i, got[0], batch[i], r.Output[i][0])
		}
	}
}

func TestConcurrentPredict(t *testing.T) {
	needORT(t)
	r := loadReference(t).Models["tiny_logit.onnx"]
	m := load(t, "tiny_logit.onnx", Options{IntraOpThreads: 1, MaxConcurrent: 2})
	in := refInput(r.InputShape)
	var wg sync.WaitGroup
	errs := make(chan error, 8*5)
	for g := 0; g < 8; g++ {
		wg.Add(1)
		go func() {
			defer wg.Done()
			for k := 0; k < 5; k++ {
				got, err := m.Predict(context.Background(), in)
				if err != nil {
					errs <- err
					return
				}
				for i := range got {
					if math.Abs(got[i]-r.Output[i][0]) > torchTol {
						errs <- errors.New("concurrent result differs from torch")
						return
					}
				}
			}
		}()
	}
	wg.Wait()
	close(errs)
	for err := range errs {
		t.Error(err)
	}
}

func TestPredictWaitsForContext(t *testing.T) {
	needORT(t)
	m := load(t, "tiny_logit.onnx", Options{MaxConcurrent: 1})
	m.sem <- struct{}{} // occupy the only runner
	defer func() { <-m.sem }()
	ctx, cancel := context.WithCancel(context.Background())
	cancel()
	_, err := m.Predict(ctx, refInput([]int64{1, 3, 32, 32}))
	if !errors.Is(err, context.Canceled) {
		t.Fatalf("got %v, want context.Canceled", err)
	}
}

func TestMismatchModelRefused(t *testing.T) {
	needORT(t)
	_, err := Load("testdata/fixed224.onnx", Options{})
	if r, _ := midsag.ReasonOf(err); r != midsag.ReasonModelInputMismatch {
		t.Fatalf("got %v, want %s", err, midsag.ReasonModelInputMismatch)
	}
	for _, s := range []string{"'input' is [1,1,224,224]", "3 slices of 32x32 (NCHW)"} {
		if !strings.Contains(err.Error(), s) {
			t.Errorf("error %q does not say %q", err, s)
		}
	}
}

func TestPredictRefusesWrongTensor(t *testing.T) {
	needORT(t)
	m := load(t, "tiny_logit.onnx", Options{})
	for _, in := range []*midsag.Tensor{
		nil,
		refInput([]int64{1, 1, 32, 32}),
		refInput([]int64{1, 32, 32, 3}),
		{Shape: []int64{1, 3, 32, 32}, Data: make([]float32, 10)},
	} {
		_, err := m.Predict(context.Background(), in)
		if r, _ := midsag.ReasonOf(err); r != midsag.ReasonModelInputMismatch {
			t.Errorf("input %v: got %v, want %s", in, err, midsag.ReasonModelInputMismatch)
		}
	}
}

func sidecarFixture(t *testing.T, mutate func(map[string]any)) string {
	t.Helper()
	dir := t.TempDir()
	data, err := os.ReadFile("testdata/tiny_logit.onnx")
	if err != nil {
		t.Fatal(err)
	}
	path := filepath.Join(dir, "m.onnx")
	if err := os.WriteFile(path, data, 0o644); err != nil {
		t.Fatal(err)
	}
	emb, err := ReadManifest(data)
	if err != nil {
		t.Fatal(err)
	}
	var man map[string]any
	b, _ := json.Marshal(emb)
	if err := json.Unmarshal(b, &man); err != nil {
		t.Fatal(err)
	}
	mutate(man)
	b, _ = json.Marshal(man)
	if err := os.WriteFile(SidecarPath(path), b, 0o644); err != nil {
		t.Fatal(err)
	}
	return path
}

func TestSidecarWinsOverEmbedded(t *testing.T) {
	path := sidecarFixture(t, func(m map[string]any) {
		m["name"] = "from-sidecar"
		m["calibration"] = map[string]any{"method": "identity"}
	})
	ins, err := Inspect(path)
	if err != nil {
		t.Fatal(err)
	}
	if ins.Manifest == nil || ins.Manifest.Name != "from-sidecar" || !strings.HasPrefix(ins.ManifestSource, "sidecar") {
		t.Fatalf("Inspect used %+v from %q (error %q), want the sidecar", ins.Manifest, ins.ManifestSource, ins.ManifestError)
	}
	needORT(t)
	m, err := Load(path, Options{})
	if err != nil {
		t.Fatal(err)
	}
	defer m.Close()
	// The embedded manifest says "tiny_logit" with temperature 1.7.
	if m.Info().Name != "from-sidecar" || m.Interpret(0).Method != "identity" {
		t.Errorf("loaded %+v with %s, want the sidecar's name and identity", m.Info(), m.Interpret(0).Method)
	}
}

func TestBadSidecarIsNotIgnored(t *testing.T) {
	path := sidecarFixture(t, func(m map[string]any) { m["threshold"] = 1.5 })
	needORT(t)
	_, err := Load(path, Options{})
	if r, _ := midsag.ReasonOf(err); r != midsag.ReasonBadModel || !strings.Contains(err.Error(), "threshold") {
		t.Fatalf("got %v, want bad_model about the threshold", err)
	}
}

func TestEmbedManifestRoundTrip(t *testing.T) {
	data, err := os.ReadFile("testdata/tiny_logit.onnx")
	if err != nil {
		t.Fatal(err)
	}
	man, err := ReadManifest(data)
	if err != nil {
		t.Fatal(err)
	}
	man.Name, man.Version = "re-embedded", "2.0.0"
	raw, _ := json.Marshal(man)
	out, err := EmbedManifest(data, raw)
	if err != nil {
		t.Fatal(err)
	}
	pm, err := parseModel(out)
	if err != nil {
		t.Fatal(err)
	}
	n := 0
	for _, e := range pm.metadata {
		if e.Key == ManifestKey {
			n++
		}
	}
	if n != 1 {
		t.Errorf("%d manifest entries after embedding, want 1 (the old one dropped)", n)
	}
	back, err := ReadManifest(out)
	if err != nil || back.Name != "re-embedded" || back.Version != "2.0.0" {
		t.Fatalf("read back %+v, %v", back, err)
	}
	if _, err := EmbedManifest(data, []byte(`{"schema":"other"}`)); err == nil {
		t.Error("an invalid manifest was embedded")
	}
	if _, err := EmbedManifest([]byte("not a model"), raw); err == nil {
		t.Error("a manifest was embedded into bytes that are not a model")
	}

	t.Run("onnx python package reads it", func(t *testing.T) {
		// Outside check of the protobuf we wrote: onnx.load and
		// onnx.checker.check_model (onnx 1.12) accept it and see the entry.
		py := "/usr/bin/python3"
		if err := exec.Command(py, "-c", "import onnx").Run(); err != nil {
			if os.Getenv("MIDSAG_REQUIRE_TOOLS") == "1" {
				t.Fatalf("%s with onnx required: %v", py, err)
			}
			t.Skipf("%s with onnx not available: %v", py, err)
		}
		p := filepath.Join(t.TempDir(), "e.onnx")
		if err := os.WriteFile(p, out, 0o644); err != nil {
			t.Fatal(err)
		}
		script := `import json,sys,onnx
m=onnx.load(sys.argv[1]); onnx.checker.check_model(m)
v=[p.value for p in m.metadata_props if p.key=="midsag.manifest"]
print(len(v), json.loads(v[0])["name"])`
		got, err := exec.Command(py, "-c", script, p).CombinedOutput()
		if err != nil {
			t.Fatalf("python: %v\n%s", err, got)
		}
		if strings.TrimSpace(string(got)) != "1 re-embedded" {
			t.Errorf("python onnx read %q, want \"1 re-embedded\"", got)
		}
	})

	t.Run("onnxruntime loads it", func(t *testing.T) {
		needORT(t)
		r := loadReference(t).Models["tiny_logit.onnx"]
		m, err := LoadBytes("re-embedded", out, nil, Options{})
		if err != nil {
			t.Fatal(err)
		}
		defer m.Close()
		if m.Info().Name != "re-embedded" {
			t.Errorf("name %q", m.Info().Name)
		}
		got, err := m.Predict(context.Background(), refInput(r.InputShape))
		if err != nil {
			t.Fatal(err)
		}
		if math.Abs(got[0]-r.Output[0][0]) > torchTol {
			t.Errorf("after embedding: %.8f, torch %.8f", got[0], r.Output[0][0])
		}
	})
}

// TestInspectMatchesONNXPackage compares our protobuf walk with what the
// onnx Python package (1.12) read from the same files in make_models.py.
func TestInspectMatchesONNXPackage(t *testing.T) {
	ref := loadReference(t)
	for name, r := range ref.Models {
		ins, err := Inspect(filepath.Join("testdata", name))
		if err != nil {
			t.Fatal(err)
		}
		if ins.IRVersion != r.IRVersion || ins.ProducerName != r.ProducerName || ins.Nodes != r.Nodes {
			t.Errorf("%s: ir %d producer %q nodes %d, onnx says %d %q %d", name,
				ins.IRVersion, ins.ProducerName, ins.Nodes, r.IRVersion, r.ProducerName, r.Nodes)
		}
		if len(ins.OpCounts) != len(r.OpCounts) {
			t.Errorf("%s: op counts %v, onnx says %v", name, ins.OpCounts, r.OpCounts)
		}
		for op, n := range r.OpCounts {
			if ins.OpCounts[op] != n {
				t.Errorf("%s: %d %s nodes, onnx says %d", name, ins.OpCounts[op], op, n)
			}
		}
		got := map[string]int64{}
		for _, o := range ins.Opsets {
			got[o.Domain] = o.Version
		}
		if len(got) != len(r.Opset) || got[""] != r.Opset[""] {
			t.Errorf("%s: opsets %v, onnx says %v", name, got, r.Opset)
		}
		if ins.Manifest == nil {
			t.Errorf("%s: no manifest: %s", name, ins.ManifestError)
		}
	}
	ins, err := Inspect("testdata/fixed224.onnx")
	if err != nil {
		t.Fatal(err)
	}
	// Shapes and types as torch.onnx.export declared them (make_models.py).
	if in := ins.Inputs; len(in) != 1 || in[0].Name != "input" || in[0].ElemType != "float32" ||
		strings.Join(in[0].Shape, ",") != "1,1,224,224" {
		t.Errorf("fixed224 inputs %+v", in)
	}
	ins, err = Inspect("testdata/tiny_two.onnx")
	if err != nil {
		t.Fatal(err)
	}
	if out := ins.Outputs; len(out) != 1 || out[0].Name != "logits" || strings.Join(out[0].Shape, ",") != "N,2" {
		t.Errorf("tiny_two outputs %+v", out)
	}
}

// TestTemperatureScaling checks sigmoid(logit(p)/T) (Guo et al. 2017,
// section 4.2) on hand-computed values.
func TestTemperatureScaling(t *testing.T) {
	for _, c := range []struct{ p, T, want float64 }{
		{0.8, 1, 0.8},        // T = 1 is the identity
		{0.123, 1, 0.123},    // T = 1 is the identity
		{0.8, 2, 2.0 / 3},    // logit(0.8) = ln 4; ln4/2 = ln 2; sigmoid(ln 2) = 2/3
		{0.2, 0.5, 1.0 / 17}, // logit(0.2) = -ln 4; /0.5 = -ln 16; sigmoid = 1/17
		{0.5, 3, 0.5},        // logit(0.5) = 0 for every T
		{0, 2, 0},            // the ends stay put
		{1, 2, 1},
	} {
		if got := (Temperature{T: c.T}).Calibrate(c.p); math.Abs(got-c.want) > 1e-12 {
			t.Errorf("T=%v p=%v: got %.15f, want %.15f", c.T, c.p, got, c.want)
		}
	}
	if got := (Identity{}).Calibrate(0.37); got != 0.37 {
		t.Errorf("identity changed 0.37 to %v", got)
	}
}

func TestInterpretUsesManifest(t *testing.T) {
	needORT(t)
	m := load(t, "tiny_logit.onnx", Options{}) // temperature 1.7, threshold 0.5
	s := m.Interpret(2)
	wantP := 1 / (1 + math.Exp(-2))
	wantC := 1 / (1 + math.Exp(-2/1.7)) // logit of sigmoid(2) is 2
	if math.Abs(s.Probability-wantP) > 1e-12 || math.Abs(s.Calibrated-wantC) > 1e-12 ||
		s.Method != "temperature" || s.Decision != "compression" {
		t.Errorf("Interpret(2) = %+v, want p %.6f calibrated %.6f compression", s, wantP, wantC)
	}
	if d := m.Interpret(-0.1).Decision; d != "no_compression" {
		t.Errorf("Interpret(-0.1) decided %q", d)
	}
}

func TestManifestValidation(t *testing.T) {
	data, err := os.ReadFile("testdata/tiny_logit.onnx")
	if err != nil {
		t.Fatal(err)
	}
	good, err := ReadManifest(data)
	if err != nil {
		t.Fatal(err)
	}
	for _, c := range []struct {
		say    string
		mutate func(*Manifest)
	}{
		{"schema", func(m *Manifest) { m.Schema = "x/v9" }},
		{"labels", func(m *Manifest) { m.Labels = []string{"a", "a"} }},
		{"layout", func(m *Manifest) { m.Input.Layout = "CHW" }},
		{"slices must be odd", func(m *Manifest) { m.Input.Slices = 2 }},
		{"height", func(m *Manifest) { m.Input.Height = 0 }},
		{"percentiles", func(m *Manifest) { m.Input.PercentileLow = 99 }},
		{"one value per slice", func(m *Manifest) { m.Input.Normalize = "meanstd" }},
		{"output.kind", func(m *Manifest) { m.Output.Kind = "score" }},
		{"positive_index", func(m *Manifest) { m.Output.PositiveIndex = 2 }},
		{"temperature must be positive", func(m *Manifest) { m.Calibration.Temperature = 0 }},
		{"calibration.method", func(m *Manifest) { m.Calibration.Method = "magic" }},
		{"threshold", func(m *Manifest) { m.Threshold = 0 }},
	} {
		m := *good
		m.Input.Mean, m.Input.Std = nil, nil
		c.mutate(&m)
		b, _ := json.Marshal(&m)
		_, err := ParseManifest(b)
		if r, _ := midsag.ReasonOf(err); r != midsag.ReasonBadModel || !strings.Contains(err.Error(), c.say) {
			t.Errorf("%s: got %v", c.say, err)
		}
	}
	if _, err := ParseManifest([]byte(`{"schema":"midsag.manifest/v1","nmae":"typo"}`)); err == nil ||
		!strings.Contains(err.Error(), "nmae") {
		t.Errorf("unknown field accepted: %v", err)
	}
}

func TestFindLibraryOrder(t *testing.T) {
	dir := t.TempDir()
	a, b := filepath.Join(dir, "a.so"), filepath.Join(dir, "b.so")
	for _, p := range []string{a, b} {
		if err := os.WriteFile(p, nil, 0o644); err != nil {
			t.Fatal(err)
		}
	}
	t.Setenv("MIDSAG_ORT_LIB", b)
	if got, err := FindLibrary(a); got != a || err != nil {
		t.Errorf("flag: got %q, %v; want %q", got, err, a)
	}
	if got, err := FindLibrary(""); got != b || err != nil {
		t.Errorf("env: got %q, %v; want %q", got, err, b)
	}
	t.Setenv("MIDSAG_ORT_LIB", filepath.Join(dir, "missing.so"))
	if _, err := FindLibrary(""); !errors.Is(err, ErrLibraryNotFound) || !strings.Contains(err.Error(), "MIDSAG_ORT_LIB") {
		t.Errorf("missing env path: got %v", err)
	}
}

// FuzzParseModel feeds arbitrary bytes to the protobuf walker, which reads
// untrusted model files: it must refuse them with an error, never panic.
func FuzzParseModel(f *testing.F) {
	for _, name := range []string{"tiny_logit.onnx", "fixed224.onnx"} {
		b, err := os.ReadFile(filepath.Join("testdata", name))
		if err != nil {
			f.Fatal(err)
		}
		f.Add(b)
	}
	f.Fuzz(func(t *testing.T, b []byte) {
		if _, err := parseModel(b); err == nil {
			_, _ = ReadManifest(b)
		}
	})
}

// BenchmarkPredict measures one [1,3,32,32] run of the tiny test model,
// mostly the fixed cost of a session call through onnxruntime_go.
func BenchmarkPredict(b *testing.B) {
	lib, err := FindLibrary("")
	if err == nil {
		err = Init(lib)
	}
	if err != nil {
		b.Skip(err)
	}
	m, err := Load("testdata/tiny_logit.onnx", Options{IntraOpThreads: 1})
	if err != nil {
		b.Fatal(err)
	}
	defer m.Close()
	in := refInput([]int64{1, 3, 32, 32})
	for b.Loop() {
		if _, err := m.Predict(context.Background(), in); err != nil {
			b.Fatal(err)
		}
	}
}

// TestReportsHowItRuns: FixedBatch follows the ONNX input's batch
// dimension (tiny_batch1.onnx is fixed at 1, tiny_logit.onnx dynamic) and
// Concurrency follows Options.MaxConcurrent (0 means 1).
func TestReportsHowItRuns(t *testing.T) {
	needORT(t)
	fixed := load(t, "tiny_batch1.onnx", Options{MaxConcurrent: 3})
	dyn := load(t, "tiny_logit.onnx", Options{})
	if !fixed.FixedBatch() || dyn.FixedBatch() || fixed.Concurrency() != 3 || dyn.Concurrency() != 1 {
		t.Errorf("fixed %v/%d, dynamic %v/%d; want true/3, false/1",
			fixed.FixedBatch(), fixed.Concurrency(), dyn.FixedBatch(), dyn.Concurrency())
	}
}
