package models

import (
	"bytes"
	"context"
	"crypto/sha256"
	"encoding/hex"
	"errors"
	"fmt"
	"io"
	"math"
	"os"
	"path/filepath"
	"runtime"
	"strings"
	"sync"

	ort "github.com/yalue/onnxruntime_go"

	"github.com/midsag/midsag"
)

// Options tune how a model runs on the CPU.
type Options struct {
	// IntraOpThreads is ONNX Runtime's thread count inside one operator;
	// 0 means runtime.NumCPU(). Inter-op threads are always 1: the small
	// sequential CNNs this tool runs have no parallel branches to use them.
	IntraOpThreads int
	// MaxConcurrent bounds how many Predict calls run at once (0 means 1),
	// so concurrent callers queue instead of oversubscribing the cores
	// with MaxConcurrent x IntraOpThreads threads.
	MaxConcurrent int
}

// Model is a loaded ONNX classifier with its manifest and calibrator. It
// implements midsag.Model and is safe for concurrent use.
type Model struct {
	manifest *Manifest
	cal      Calibrator
	info     midsag.ModelInfo
	// batch is the model's fixed batch size, or -1 if the batch is dynamic.
	batch int64
	// width is the output's class dimension: 1 or 2.
	width int64
	sem   chan struct{}

	// mu guards session: Predict holds it shared, Close exclusively, so a
	// session is never destroyed under a running call.
	mu      sync.RWMutex
	session *ort.DynamicAdvancedSession
}

var _ midsag.Model = (*Model)(nil)

// Load reads NAME.onnx and, if present, its sidecar NAME.manifest.json,
// and loads the model with ONNX Runtime (Init must have succeeded).
func Load(path string, opts Options) (*Model, error) {
	data, sum, err := readHashed(path)
	if err != nil {
		return nil, fmt.Errorf("load model: %w", err)
	}
	sidecar, err := readSidecar(path)
	if err != nil {
		return nil, fmt.Errorf("load model %s: %w", path, err)
	}
	m, err := loadBytes(data, sum, sidecar, opts)
	if err != nil {
		return nil, fmt.Errorf("load model %s: %w", filepath.Base(path), err)
	}
	return m, nil
}

// readHashed reads a file and computes its sha256 in the same pass, so a
// large model's bytes are walked once rather than read, then hashed.
func readHashed(path string) ([]byte, string, error) {
	f, err := os.Open(path)
	if err != nil {
		return nil, "", err
	}
	defer f.Close()
	var buf bytes.Buffer
	if st, err := f.Stat(); err == nil && st.Size() > 0 {
		buf.Grow(int(st.Size()) + bytes.MinRead)
	}
	h := sha256.New()
	if _, err := buf.ReadFrom(io.TeeReader(f, h)); err != nil {
		return nil, "", fmt.Errorf("read %s: %w", path, err)
	}
	return buf.Bytes(), hex.EncodeToString(h.Sum(nil)), nil
}

// LoadBytes loads a model from its bytes; name is used in errors only.
// sidecar, when non-nil, is the manifest and wins over one embedded in the
// model's metadata. It serves models embedded in the binary as well as files.
func LoadBytes(name string, onnx []byte, sidecar []byte, opts Options) (*Model, error) {
	sum := sha256.Sum256(onnx)
	m, err := loadBytes(onnx, hex.EncodeToString(sum[:]), sidecar, opts)
	if err != nil {
		return nil, fmt.Errorf("load model %s: %w", name, err)
	}
	return m, nil
}

// loadBytes checks the manifest against the inputs and outputs the ONNX
// protobuf declares (read by parseModel, so no ONNX Runtime session is
// built just to list them) and then builds the model's one session.
func loadBytes(onnx []byte, sum string, sidecar []byte, opts Options) (*Model, error) {
	if err := initialised(); err != nil {
		return nil, err
	}
	if opts.IntraOpThreads < 0 || opts.MaxConcurrent < 0 {
		return nil, fmt.Errorf("options: thread and concurrency counts must not be negative, got %d and %d", opts.IntraOpThreads, opts.MaxConcurrent)
	}
	pm, err := parseModel(onnx)
	if err != nil {
		return nil, err
	}
	man, err := pm.manifest(sidecar)
	if err != nil {
		return nil, err
	}
	cal, err := CalibratorFromManifest(man.Calibration)
	if err != nil {
		return nil, err
	}
	batch, err := checkInput(man, pm.inputs)
	if err != nil {
		return nil, err
	}
	width, err := checkOutput(man, pm.outputs, batch)
	if err != nil {
		return nil, err
	}
	sess, err := newSession(onnx, man, opts)
	if err != nil {
		return nil, err
	}
	conc := opts.MaxConcurrent
	if conc == 0 {
		conc = 1
	}
	return &Model{
		manifest: man,
		cal:      cal,
		info:     midsag.ModelInfo{Name: man.Name, Version: man.Version, SHA256: sum},
		batch:    batch,
		width:    width,
		sem:      make(chan struct{}, conc),
		session:  sess,
	}, nil
}

// newSession builds the ONNX Runtime session with the options' threads.
func newSession(onnx []byte, man *Manifest, opts Options) (*ort.DynamicAdvancedSession, error) {
	so, err := ort.NewSessionOptions()
	if err != nil {
		return nil, fmt.Errorf("session options: %w", err)
	}
	defer so.Destroy()
	threads := opts.IntraOpThreads
	if threads == 0 {
		threads = runtime.NumCPU()
	}
	if err := so.SetIntraOpNumThreads(threads); err != nil {
		return nil, fmt.Errorf("set intra-op threads: %w", err)
	}
	if err := so.SetInterOpNumThreads(1); err != nil {
		return nil, fmt.Errorf("set inter-op threads: %w", err)
	}
	sess, err := ort.NewDynamicAdvancedSessionWithONNXData(onnx,
		[]string{man.Input.Name}, []string{man.Output.Name}, so)
	if err != nil {
		return nil, midsag.Reject(midsag.ReasonBadModel, "ONNX Runtime cannot create a session", err)
	}
	return sess, nil
}

// checkInput finds the manifest's input among the model's inputs and
// checks its type and shape; it returns the model's batch dimension.
func checkInput(man *Manifest, ins []pbValueInfo) (int64, error) {
	if len(ins) != 1 {
		return 0, midsag.Rejectf(midsag.ReasonModelInputMismatch,
			"model has %d inputs (%s) but the manifest describes exactly one, %q", len(ins), ioNames(ins), man.Input.Name)
	}
	in := ins[0]
	if in.name != man.Input.Name {
		return 0, midsag.Rejectf(midsag.ReasonModelInputMismatch,
			"model input is named %q but the manifest names %q", in.name, man.Input.Name)
	}
	got := in.intDims()
	if in.elemType != "float32" || got == nil {
		return 0, midsag.Rejectf(midsag.ReasonModelInputMismatch,
			"model input %q is %s, want a float32 tensor", in.name, in.describe())
	}
	want := man.inputDims()
	ok := len(got) == len(want) && (got[0] == -1 || got[0] >= 1)
	for i := 1; ok && i < len(want); i++ {
		ok = got[i] == want[i]
	}
	if !ok {
		return 0, midsag.Rejectf(midsag.ReasonModelInputMismatch,
			"model input '%s' is %s but the manifest asks for %s", in.name, formatDims(got), man.describeInput())
	}
	return got[0], nil
}

// checkOutput finds the manifest's output and checks it is a float32
// [N,1] or [N,2] tensor with the input's batch; it returns 1 or 2. A
// manifest that does not fit the model's outputs is a bad model, not a
// study that does not fit: no study could be scored with it.
func checkOutput(man *Manifest, outs []pbValueInfo, batch int64) (int64, error) {
	for _, o := range outs {
		if o.name != man.Output.Name {
			continue
		}
		d := o.intDims()
		if o.elemType != "float32" || d == nil {
			return 0, midsag.Rejectf(midsag.ReasonBadModel, "model output %q is %s, want a float32 tensor", o.name, o.describe())
		}
		if len(d) != 2 || (d[1] != 1 && d[1] != 2) || (d[0] != batch && d[0] != -1) {
			return 0, midsag.Rejectf(midsag.ReasonBadModel,
				"model output '%s' is %s but the manifest needs [N,1] or [N,2] with N=%s as in the input", o.name, formatDims(d), formatDim(batch))
		}
		if int64(man.Output.PositiveIndex) >= d[1] {
			return 0, midsag.Rejectf(midsag.ReasonBadModel,
				"manifest output.positive_index is %d but model output '%s' has %d column(s)", man.Output.PositiveIndex, o.name, d[1])
		}
		return d[1], nil
	}
	return 0, midsag.Rejectf(midsag.ReasonBadModel,
		"manifest output.name is %q but the model has no such output; its outputs are %s (set output.name to one of them)", man.Output.Name, ioNames(outs))
}

func ioNames(v []pbValueInfo) string {
	names := make([]string, len(v))
	for i, x := range v {
		names[i] = fmt.Sprintf("%q", x.name)
	}
	return strings.Join(names, ", ")
}

func formatDim(d int64) string {
	if d < 0 {
		return "?"
	}
	return fmt.Sprint(d)
}

func formatDims(d []int64) string {
	s := make([]string, len(d))
	for i, x := range d {
		s[i] = formatDim(x)
	}
	return "[" + strings.Join(s, ",") + "]"
}

// Info returns the manifest's name and version and the sha256 of the model bytes.
func (m *Model) Info() midsag.ModelInfo { return m.info }

// Concurrency is how many Predict calls run at once (Options.MaxConcurrent);
// callers with many independent inputs, such as an occlusion map, keep
// this many calls in flight.
func (m *Model) Concurrency() int { return cap(m.sem) }

// FixedBatch reports whether the model's batch dimension is fixed (to 1):
// Predict then runs a batch item by item, so callers gain nothing by
// batching and should spread single inputs over concurrent calls.
func (m *Model) FixedBatch() bool { return m.batch != -1 }

// InputSpec returns the input the manifest asks for.
func (m *Model) InputSpec() midsag.InputSpec { return m.manifest.InputSpec() }

// Manifest returns the model's manifest; callers must not modify it.
func (m *Model) Manifest() *Manifest { return m.manifest }

// Calibrator returns the calibrator the manifest selects.
func (m *Model) Calibrator() Calibrator { return m.cal }

// Predict runs the model on a batch laid out as the manifest says and
// returns one raw output per item. For an [N,1] output the raw output is
// the value itself. For an [N,2] output of kind "logit" it is the positive
// logit minus the negative one: softmax over two logits equals the sigmoid
// of their difference, so this single equivalent logit calibrates and
// thresholds exactly like an [N,1] model. For an [N,2] output of kind
// "probability" it is the positive column.
//
// A model whose batch dimension is fixed at 1 is run item by item. Calls
// beyond Options.MaxConcurrent wait their turn or give up when ctx ends.
func (m *Model) Predict(ctx context.Context, in *midsag.Tensor) ([]float64, error) {
	n, err := m.checkTensor(in)
	if err != nil {
		return nil, err
	}
	select {
	case m.sem <- struct{}{}:
	case <-ctx.Done():
		return nil, fmt.Errorf("predict: waiting for a free runner: %w", ctx.Err())
	}
	defer func() { <-m.sem }()
	m.mu.RLock()
	defer m.mu.RUnlock()
	if m.session == nil {
		return nil, errors.New("predict: model is closed")
	}
	if m.batch == -1 || m.batch == n {
		return m.run(in.Shape, in.Data)
	}
	// Only batch == 1 remains: checkTensor refuses other fixed sizes.
	per := len(in.Data) / int(n)
	shape := append([]int64{1}, in.Shape[1:]...)
	out := make([]float64, 0, n)
	for i := 0; i < int(n); i++ {
		if err := ctx.Err(); err != nil {
			return nil, fmt.Errorf("predict: %w", err)
		}
		r, err := m.run(shape, in.Data[i*per:(i+1)*per])
		if err != nil {
			return nil, fmt.Errorf("predict item %d: %w", i, err)
		}
		out = append(out, r...)
	}
	return out, nil
}

// checkTensor returns the batch size of in after checking it against the
// manifest's layout and the model's batch dimension.
func (m *Model) checkTensor(in *midsag.Tensor) (int64, error) {
	if in == nil {
		return 0, midsag.Rejectf(midsag.ReasonModelInputMismatch, "no input tensor")
	}
	want := m.manifest.inputDims()
	ok := len(in.Shape) == len(want) && in.Shape[0] >= 1
	size := int64(1)
	for i := 0; ok && i < len(want); i++ {
		ok = i == 0 || in.Shape[i] == want[i]
		size *= in.Shape[i]
	}
	if !ok {
		return 0, midsag.Rejectf(midsag.ReasonModelInputMismatch,
			"input tensor is %s but the model takes [N,%s] (%s)", formatDims(in.Shape), formatDims(want[1:])[1:], m.manifest.describeInput())
	}
	if size != int64(len(in.Data)) {
		return 0, midsag.Rejectf(midsag.ReasonModelInputMismatch,
			"input tensor shape %s holds %d values but %d were given", formatDims(in.Shape), size, len(in.Data))
	}
	n := in.Shape[0]
	if m.batch > 1 && n != m.batch {
		return 0, midsag.Rejectf(midsag.ReasonModelInputMismatch,
			"model takes batches of exactly %d, got %d", m.batch, n)
	}
	return n, nil
}

// run executes one session call; the caller holds mu and a semaphore slot.
func (m *Model) run(shape []int64, data []float32) ([]float64, error) {
	t, err := ort.NewTensor(ort.NewShape(shape...), data)
	if err != nil {
		return nil, fmt.Errorf("make input tensor: %w", err)
	}
	defer t.Destroy()
	outs := []ort.Value{nil}
	if err := m.session.Run([]ort.Value{t}, outs); err != nil {
		return nil, fmt.Errorf("run model: %w", err)
	}
	defer outs[0].Destroy()
	ot, ok := outs[0].(*ort.Tensor[float32])
	if !ok {
		return nil, midsag.Rejectf(midsag.ReasonBadModel, "model output %q is not a float32 tensor", m.manifest.Output.Name)
	}
	n := shape[0]
	if s := ot.GetShape(); len(s) != 2 || s[0] != n || s[1] != m.width {
		return nil, midsag.Rejectf(midsag.ReasonBadModel, "model output is %s for a batch of %d, want [%d,%d]", formatDims(s), n, n, m.width)
	}
	v := ot.GetData()
	res := make([]float64, n)
	pos := m.manifest.Output.PositiveIndex
	for i := range res {
		row := v[i*int(m.width) : (i+1)*int(m.width)]
		if math.IsNaN(float64(row[0])) || math.IsNaN(float64(row[m.width-1])) {
			return nil, midsag.Rejectf(midsag.ReasonBadModel, "model output for item %d is NaN", i)
		}
		switch {
		case m.width == 1:
			res[i] = float64(row[0])
		case m.manifest.Output.Kind == KindLogit:
			res[i] = float64(row[pos]) - float64(row[1-pos])
		default:
			res[i] = float64(row[pos])
		}
	}
	return res, nil
}

// Interpret turns a raw output from Predict into the uncalibrated and
// calibrated probability and the decision: Labels[1] when the calibrated
// probability is at or above the threshold, else Labels[0].
func (m *Model) Interpret(raw float64) midsag.Score {
	p := raw
	if m.manifest.Output.Kind == KindLogit {
		p = Sigmoid(raw)
	}
	// A probability output a hair outside [0,1] from float rounding is
	// clamped rather than allowed to reach the calibrator's logit.
	p = math.Min(1, math.Max(0, p))
	c := m.cal.Calibrate(p)
	decision := m.manifest.Labels[0]
	if c >= m.manifest.Threshold {
		decision = m.manifest.Labels[1]
	}
	return midsag.Score{
		RawOutput:   raw,
		Probability: p,
		Calibrated:  c,
		Method:      m.cal.Method(),
		Threshold:   m.manifest.Threshold,
		Decision:    decision,
	}
}

// Close releases the ONNX Runtime session after running calls finish.
// Further Predict calls fail; Close is safe to call more than once.
func (m *Model) Close() error {
	m.mu.Lock()
	defer m.mu.Unlock()
	if m.session == nil {
		return nil
	}
	err := m.session.Destroy()
	m.session = nil
	if err != nil {
		return fmt.Errorf("close model: %w", err)
	}
	return nil
}
