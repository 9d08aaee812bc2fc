package models

import (
	"bytes"
	"encoding/json"
	"fmt"
	"math"

	"github.com/midsag/midsag"
)

// ManifestKey is the ONNX metadata_props key that holds an embedded manifest.
const ManifestKey = "midsag.manifest"

// ManifestSchema is the schema string of the manifest format this package reads.
const ManifestSchema = "midsag.manifest/v1"

// Manifest describes how to feed a model and read its answer. It is
// midsag's own JSON format, stored in the ONNX metadata under ManifestKey or
// in a sidecar NAME.manifest.json.
type Manifest struct {
	Schema         string `json:"schema"`
	Name           string `json:"name"`
	Version        string `json:"version"`
	Description    string `json:"description,omitempty"`
	IntendedUse    string `json:"intended_use,omitempty"`
	TrainingCohort string `json:"training_cohort,omitempty"`
	// Labels are the two decision names: Labels[0] negative, Labels[1] positive.
	Labels      []string        `json:"labels"`
	Input       InputManifest   `json:"input"`
	Output      OutputManifest  `json:"output"`
	Calibration CalibrationSpec `json:"calibration"`
	// Threshold is the decision threshold on the calibrated probability.
	Threshold float64 `json:"threshold"`
}

// InputManifest names the model's input tensor and how to build it; the
// fields mirror midsag.InputSpec.
type InputManifest struct {
	Name           string    `json:"name"`
	Layout         string    `json:"layout"`
	Height         int       `json:"height"`
	Width          int       `json:"width"`
	Slices         int       `json:"slices"`
	SliceStep      int       `json:"slice_step"`
	PixelSpacingMM float64   `json:"pixel_spacing_mm"`
	Normalize      string    `json:"normalize"`
	PercentileLow  float64   `json:"percentile_low"`
	PercentileHigh float64   `json:"percentile_high"`
	Mean           []float64 `json:"mean,omitempty"`
	Std            []float64 `json:"std,omitempty"`
}

// OutputManifest names the model's output tensor and how to read it. The
// tensor is [N,1] (one logit or probability of the positive class) or [N,2]
// (two class logits or probabilities; PositiveIndex picks the positive one).
type OutputManifest struct {
	Name string `json:"name"`
	// Kind is "logit" or "probability".
	Kind          string `json:"kind"`
	PositiveIndex int    `json:"positive_index"`
}

// CalibrationSpec selects a calibrator and holds its parameters. New
// methods add their parameters here as optional fields.
type CalibrationSpec struct {
	// Method is "identity", "temperature", "platt" or "isotonic".
	Method string `json:"method"`
	// Temperature is T of temperature scaling (method "temperature").
	Temperature float64 `json:"temperature,omitempty"`
	// Platt holds A and B of Platt scaling (method "platt").
	Platt *PlattParams `json:"platt,omitempty"`
	// Isotonic holds the breakpoints of isotonic regression (method "isotonic").
	Isotonic *IsotonicParams `json:"isotonic,omitempty"`
	// PriorShift, when set, follows any method with a prior-shift
	// adjustment from the fitting table's prevalence to a target one.
	PriorShift *PriorShiftParams `json:"prior_shift,omitempty"`
}

// PlattParams are the two parameters of Platt scaling,
// P(y=1|f) = 1/(1+exp(A·f+B)) with f = logit(p) (see Platt).
type PlattParams struct {
	A float64 `json:"a"`
	B float64 `json:"b"`
}

// IsotonicParams are the breakpoints of a fitted isotonic regression: X
// strictly increasing on the probability scale, Y non-decreasing in [0,1]
// (see Isotonic).
type IsotonicParams struct {
	X []float64 `json:"x"`
	Y []float64 `json:"y"`
}

// PriorShiftParams are the two prevalences of a prior-shift adjustment
// (see PriorShift): the positive share of the table the calibrator was
// fitted on, and the share where the model is used.
type PriorShiftParams struct {
	TrainPrevalence  float64 `json:"train_prevalence"`
	TargetPrevalence float64 `json:"target_prevalence"`
}

// Output kinds.
const (
	KindLogit       = "logit"
	KindProbability = "probability"
)

// maxSide bounds the input size a manifest may ask for; far above any 2.5D
// MRI classifier input, it only stops absurd allocations (common practice).
const maxSide = 4096

// ParseManifest decodes a manifest, validates it against
// ManifestJSONSchema (filling the schema's defaults for absent fields) and
// then with Validate. Unknown fields are refused so that a misspelt key is
// not silently ignored. Errors carry midsag.ReasonBadModel and name the
// field, what was wrong and what is allowed.
func ParseManifest(data []byte) (*Manifest, error) {
	dec := json.NewDecoder(bytes.NewReader(data))
	dec.UseNumber()
	var raw any
	if err := dec.Decode(&raw); err != nil {
		return nil, midsag.Reject(midsag.ReasonBadModel, "manifest is not valid JSON", err)
	}
	if dec.More() {
		return nil, midsag.Rejectf(midsag.ReasonBadModel, "manifest has data after its JSON object")
	}
	if err := manifestSchema.check("", raw); err != nil {
		return nil, err
	}
	filled, err := json.Marshal(raw)
	if err != nil {
		return nil, fmt.Errorf("manifest: %w", err)
	}
	strict := json.NewDecoder(bytes.NewReader(filled))
	strict.DisallowUnknownFields()
	var m Manifest
	if err := strict.Decode(&m); err != nil {
		// The schema and the struct are kept in step by a test; this is
		// reached only if they drift.
		return nil, midsag.Reject(midsag.ReasonBadModel, "manifest does not fit its Go type", err)
	}
	if err := m.Validate(); err != nil {
		return nil, err
	}
	return &m, nil
}

// Validate checks every field of the manifest and returns the first
// problem as a midsag.ReasonBadModel error.
func (m *Manifest) Validate() error {
	if m.Schema != ManifestSchema {
		return badManifest("schema is %q, want %q", m.Schema, ManifestSchema)
	}
	if m.Name == "" || m.Version == "" {
		return badManifest("name and version are required")
	}
	if len(m.Labels) != 2 || m.Labels[0] == "" || m.Labels[1] == "" || m.Labels[0] == m.Labels[1] {
		return badManifest("labels must be two distinct names [negative, positive], got %q", m.Labels)
	}
	if err := m.Input.validate(); err != nil {
		return err
	}
	if err := m.Output.validate(); err != nil {
		return err
	}
	if _, err := CalibratorFromManifest(m.Calibration); err != nil {
		return err
	}
	if !(m.Threshold > 0 && m.Threshold < 1) {
		return badManifest("threshold must be strictly between 0 and 1, got %v", m.Threshold)
	}
	return nil
}

func badManifest(format string, args ...any) error {
	return midsag.Rejectf(midsag.ReasonBadModel, "manifest: "+format, args...)
}

// validate checks the input's tensor name, layout, size, slices and
// spacing, then its normalisation.
func (in InputManifest) validate() error {
	if in.Name == "" {
		return badManifest("input.name is required")
	}
	if in.Layout != "NCHW" && in.Layout != "NHWC" {
		return badManifest("input.layout is %q, want NCHW or NHWC", in.Layout)
	}
	if in.Height < 1 || in.Width < 1 || in.Height > maxSide || in.Width > maxSide {
		return badManifest("input.height and input.width must be in 1..%d, got %dx%d", maxSide, in.Height, in.Width)
	}
	// Odd, so the centre slice sits in the middle channel (midsag.InputSpec).
	if in.Slices < 1 || in.Slices%2 == 0 || in.Slices > 255 {
		return badManifest("input.slices must be odd and in 1..255, got %d", in.Slices)
	}
	if in.SliceStep < 1 {
		return badManifest("input.slice_step must be at least 1, got %d", in.SliceStep)
	}
	if !(in.PixelSpacingMM >= 0) || math.IsInf(in.PixelSpacingMM, 0) {
		return badManifest("input.pixel_spacing_mm must be zero or positive, got %v", in.PixelSpacingMM)
	}
	return in.validateNormalize()
}

// validateNormalize checks the percentiles and the normalisation with
// its per-slice mean and std.
func (in InputManifest) validateNormalize() error {
	if !(in.PercentileLow >= 0 && in.PercentileLow < in.PercentileHigh && in.PercentileHigh <= 100) {
		return badManifest("input.percentile_low and input.percentile_high must satisfy 0 <= low < high <= 100, got %v and %v; "+
			"both normalize modes need them, since the stack is clipped to these percentiles and scaled to [0,1] before \"meanstd\" applies (x-mean)/std (docs/MANIFEST.md)",
			in.PercentileLow, in.PercentileHigh)
	}
	switch in.Normalize {
	case "percentile":
		if len(in.Mean) != 0 || len(in.Std) != 0 {
			return badManifest("input.mean and input.std apply only to normalize \"meanstd\"")
		}
	case "meanstd":
		if len(in.Mean) != in.Slices || len(in.Std) != in.Slices {
			return badManifest("input.mean and input.std need one value per slice (%d), got %d and %d", in.Slices, len(in.Mean), len(in.Std))
		}
		for c := range in.Std {
			if !(in.Std[c] > 0) || math.IsInf(in.Std[c], 0) || math.IsNaN(in.Mean[c]) || math.IsInf(in.Mean[c], 0) {
				return badManifest("input.mean[%d]=%v, input.std[%d]=%v: std must be positive and both finite", c, in.Mean[c], c, in.Std[c])
			}
		}
	default:
		return badManifest("input.normalize is %q, want percentile or meanstd", in.Normalize)
	}
	return nil
}

// validate checks the output's tensor name, kind and positive index.
func (out OutputManifest) validate() error {
	if out.Name == "" {
		return badManifest("output.name is required")
	}
	if out.Kind != KindLogit && out.Kind != KindProbability {
		return badManifest("output.kind is %q, want logit or probability", out.Kind)
	}
	if out.PositiveIndex != 0 && out.PositiveIndex != 1 {
		return badManifest("output.positive_index must be 0 or 1, got %d", out.PositiveIndex)
	}
	return nil
}

// InputSpec returns the input description the preprocessor builds tensors to.
func (m *Manifest) InputSpec() midsag.InputSpec {
	in := m.Input
	return midsag.InputSpec{
		Layout:         in.Layout,
		Height:         in.Height,
		Width:          in.Width,
		Slices:         in.Slices,
		SliceStep:      in.SliceStep,
		Normalize:      in.Normalize,
		PercentileLow:  in.PercentileLow,
		PercentileHigh: in.PercentileHigh,
		Mean:           append([]float64(nil), in.Mean...),
		Std:            append([]float64(nil), in.Std...),
		PixelSpacingMM: in.PixelSpacingMM,
	}
}

// inputDims returns the input shape the manifest asks for, batch first
// (batch given as -1: any).
func (m *Manifest) inputDims() []int64 {
	in := m.Input
	if in.Layout == "NHWC" {
		return []int64{-1, int64(in.Height), int64(in.Width), int64(in.Slices)}
	}
	return []int64{-1, int64(in.Slices), int64(in.Height), int64(in.Width)}
}

// describeInput says in words what the manifest asks for, for errors.
func (m *Manifest) describeInput() string {
	return fmt.Sprintf("%d slices of %dx%d (%s)", m.Input.Slices, m.Input.Height, m.Input.Width, m.Input.Layout)
}
