package models

import (
	"fmt"
	"path/filepath"
	"strings"

	"github.com/midsag/midsag"
)

// Output kinds as "midsag model init --output-kind" names them: what the
// model's output holds, each mapped onto a manifest kind and width.
const (
	// InitLogit is one logit of the positive class, [N,1].
	InitLogit = "logit"
	// InitProbability is one probability of the positive class, [N,1]
	// (a sigmoid inside the model).
	InitProbability = "probability"
	// InitSoftmax is two class probabilities, [N,2] (a softmax inside the
	// model); the positive column is read.
	InitSoftmax = "softmax"
	// InitLogits is two class logits, [N,2]; their difference is read.
	InitLogits = "logits"
)

// InitOptions are what a manifest needs that the model file cannot say.
// Zero values mean "infer from the model" or the documented default
// (docs/MANIFEST.md).
type InitOptions struct {
	Name, Version                            string
	Description, IntendedUse, TrainingCohort string
	// Input and Output name the tensors; empty picks the only one.
	Input, Output string
	// Layout, Height, Width and Slices default to what the input's shape says.
	Layout                string
	Height, Width, Slices int
	SliceStep             int
	PixelSpacingMM        float64
	// Normalize is "percentile" (default) or "meanstd".
	Normalize                     string
	PercentileLow, PercentileHigh float64
	// Mean and Std hold one value per slice, or one value for all slices.
	Mean, Std []float64
	// OutputKind is InitLogit, InitProbability, InitSoftmax or InitLogits;
	// empty infers it from the output's width and the operator producing it.
	OutputKind string
	// PositiveIndex is the positive class's column of an [N,2] output;
	// -1 means the default, 1.
	PositiveIndex int
	Labels        []string
	Threshold     float64
}

// Defaults of InitOptions (docs/MANIFEST.md).
const (
	DefaultVersion        = "0.1.0"
	DefaultPercentileLow  = 1
	DefaultPercentileHigh = 99
	DefaultThreshold      = 0.5
)

// DefaultLabels are the decision names when none are given.
var DefaultLabels = []string{"no_compression", "compression"}

// InitManifest builds the manifest of the ONNX model in onnx from its own
// input and output declarations and opts, and validates it. name is the
// file's base name, the manifest's name when opts.Name is empty. The
// warnings say where opts contradict what the graph suggests.
func InitManifest(name string, onnx []byte, opts InitOptions) (*Manifest, []string, error) {
	pm, err := parseModel(onnx)
	if err != nil {
		return nil, nil, err
	}
	m, err := initManifest(pm, name, opts)
	if err != nil {
		return nil, nil, err
	}
	return m, initWarnings(pm, m, opts), nil
}

// initWarnings flags an --output-kind that the operator computing the
// output argues against: probabilities read as logits (or the reverse)
// give a wrong probability without any error.
func initWarnings(pm *pbModel, m *Manifest, opts InitOptions) []string {
	if opts.OutputKind == "" {
		return nil
	}
	op := pm.producers[m.Output.Name]
	o, _ := pick("output", "", m.Output.Name, pm.outputs)
	guess := inferKind(o.intDims()[1], op)
	if guess == opts.OutputKind {
		return nil
	}
	return []string{fmt.Sprintf("output %q is computed by %s, which suggests --output-kind %s, not %s; check what the model returns",
		m.Output.Name, or(op, "no operator"), guess, opts.OutputKind)}
}

func initManifest(pm *pbModel, name string, opts InitOptions) (*Manifest, error) {
	var err error
	m := &Manifest{
		Schema:         ManifestSchema,
		Name:           or(opts.Name, strings.TrimSuffix(filepath.Base(name), ".onnx")),
		Version:        or(opts.Version, DefaultVersion),
		Description:    opts.Description,
		IntendedUse:    opts.IntendedUse,
		TrainingCohort: opts.TrainingCohort,
		Labels:         opts.Labels,
		Calibration:    CalibrationSpec{Method: "identity"},
		Threshold:      opts.Threshold,
	}
	if m.Labels == nil {
		m.Labels = append([]string(nil), DefaultLabels...)
	}
	if m.Threshold == 0 {
		m.Threshold = DefaultThreshold
	}
	if m.Input, err = initInput(pm, opts); err != nil {
		return nil, err
	}
	if m.Output, err = initOutput(pm, opts); err != nil {
		return nil, err
	}
	if err := m.Validate(); err != nil {
		return nil, err
	}
	return m, nil
}

func or(s, def string) string {
	if s == "" {
		return def
	}
	return s
}

// pick returns the value named name, or the only one when name is empty.
func pick(what, flag, name string, vs []pbValueInfo) (pbValueInfo, error) {
	for _, v := range vs {
		if v.name == name || (name == "" && len(vs) == 1) {
			return v, nil
		}
	}
	if name == "" {
		return pbValueInfo{}, midsag.Rejectf(midsag.ReasonBadModel,
			"model has %d %ss (%s); name the one to use with %s", len(vs), what, ioNames(vs), flag)
	}
	return pbValueInfo{}, midsag.Rejectf(midsag.ReasonBadModel,
		"model has no %s %q; its %ss are %s", what, name, what, ioNames(vs))
}

// initInput fills the input section from the model's input shape and opts.
func initInput(pm *pbModel, opts InitOptions) (InputManifest, error) {
	in, err := pick("input", "--input", opts.Input, pm.inputs)
	if err != nil {
		return InputManifest{}, err
	}
	d := in.intDims()
	if len(d) != 4 {
		return InputManifest{}, midsag.Rejectf(midsag.ReasonBadModel,
			"model input %q is %s; midsag feeds 4-D float32 tensors [N,C,H,W] or [N,H,W,C]", in.name, in.describe())
	}
	im := InputManifest{
		Name:           in.name,
		Layout:         opts.Layout,
		SliceStep:      opts.SliceStep,
		PixelSpacingMM: opts.PixelSpacingMM,
		Normalize:      or(opts.Normalize, "percentile"),
		PercentileLow:  opts.PercentileLow,
		PercentileHigh: opts.PercentileHigh,
	}
	if im.Layout == "" {
		im.Layout = guessLayout(d)
	}
	c, h, w := d[1], d[2], d[3]
	if im.Layout == "NHWC" {
		h, w, c = d[1], d[2], d[3]
	}
	im.Slices = pickDim(opts.Slices, c)
	im.Height = pickDim(opts.Height, h)
	im.Width = pickDim(opts.Width, w)
	if im.Slices == 0 || im.Height == 0 || im.Width == 0 {
		return InputManifest{}, midsag.Rejectf(midsag.ReasonBadModel,
			"model input %q is %s with symbolic sizes; give --slices, --height and --width", in.name, in.describe())
	}
	if im.SliceStep == 0 {
		im.SliceStep = 1
	}
	if im.PercentileLow == 0 && im.PercentileHigh == 0 {
		im.PercentileLow, im.PercentileHigh = DefaultPercentileLow, DefaultPercentileHigh
	}
	im.Mean = perSlice(opts.Mean, im.Slices)
	im.Std = perSlice(opts.Std, im.Slices)
	return im, nil
}

// guessLayout reads the layout from where the small channel axis sits:
// NHWC when the last axis is the smallest known one, else NCHW.
func guessLayout(d []int64) string {
	if d[3] > 0 && (d[1] < 0 || d[3] < d[1]) {
		return "NHWC"
	}
	return "NCHW"
}

// pickDim returns the flag's value when given, else the model's dimension
// when it is a number, else 0.
func pickDim(flag int, dim int64) int {
	if flag > 0 {
		return flag
	}
	if dim > 0 {
		return int(dim)
	}
	return 0
}

// perSlice expands a single value to every slice.
func perSlice(v []float64, slices int) []float64 {
	if len(v) != 1 {
		return v
	}
	out := make([]float64, slices)
	for i := range out {
		out[i] = v[0]
	}
	return out
}

// initOutput fills the output section from the model's output and opts.
func initOutput(pm *pbModel, opts InitOptions) (OutputManifest, error) {
	o, err := pick("output", "--output", opts.Output, pm.outputs)
	if err != nil {
		return OutputManifest{}, err
	}
	d := o.intDims()
	if len(d) != 2 || (d[1] != 1 && d[1] != 2) {
		return OutputManifest{}, midsag.Rejectf(midsag.ReasonBadModel,
			"model output %q is %s; midsag reads [N,1] (one logit or probability) or [N,2] (two class logits or softmax probabilities)", o.name, o.describe())
	}
	kind := opts.OutputKind
	if kind == "" {
		kind = inferKind(d[1], pm.producers[o.name])
	}
	om := OutputManifest{Name: o.name}
	wantWidth := int64(2)
	switch kind {
	case InitLogit, InitProbability:
		om.Kind, wantWidth = kind, 1
	case InitSoftmax:
		om.Kind = KindProbability
	case InitLogits:
		om.Kind = KindLogit
	default:
		return OutputManifest{}, midsag.Rejectf(midsag.ReasonBadModel,
			"--output-kind is %q, want logit, probability, softmax or logits", kind)
	}
	if d[1] != wantWidth {
		return OutputManifest{}, midsag.Rejectf(midsag.ReasonBadModel,
			"--output-kind %s needs an [N,%d] output but %q is %s", kind, wantWidth, o.name, o.describe())
	}
	if wantWidth == 2 {
		om.PositiveIndex = 1
		if opts.PositiveIndex >= 0 {
			om.PositiveIndex = opts.PositiveIndex
		}
	}
	return om, nil
}

// inferKind names the output kind from the output's width and the
// operator that computes it: a Sigmoid or Softmax last means
// probabilities, anything else logits.
func inferKind(width int64, producer string) string {
	switch {
	case width == 1 && producer == "Sigmoid":
		return InitProbability
	case width == 1:
		return InitLogit
	case producer == "Softmax":
		return InitSoftmax
	default:
		return InitLogits
	}
}

// InitCommand returns the "midsag model init" command that writes a
// manifest for the model at path, for "model inspect" on a model without
// one: the inferred layout, sizes and output kind spelt out so they can be
// checked, or placeholders for what the model does not declare.
func InitCommand(path string, onnx []byte) string {
	cmd := "midsag model init " + path
	m, _, err := InitManifest(path, onnx, InitOptions{PositiveIndex: -1})
	if err != nil {
		return cmd + " --slices S --height H --width W --output-kind logit|probability|softmax|logits"
	}
	pm, _ := parseModel(onnx)
	o, _ := pick("output", "", m.Output.Name, pm.outputs)
	kind := inferKind(o.intDims()[1], pm.producers[o.name])
	return fmt.Sprintf("%s --layout %s --slices %d --height %d --width %d --normalize percentile --output-kind %s",
		cmd, m.Input.Layout, m.Input.Slices, m.Input.Height, m.Input.Width, kind)
}
