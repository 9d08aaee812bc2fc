package midsag

import "time"

// ModelInfo identifies the model that produced a result.
type ModelInfo struct {
	Name    string `json:"name"`
	Version string `json:"version"`
	SHA256  string `json:"sha256"`
}

// Score is a model's output for one study, before and after calibration.
type Score struct {
	// RawOutput is the model's positive-class output as produced (a logit or
	// a probability, as the manifest says).
	RawOutput float64
	// Probability is RawOutput as a probability, uncalibrated.
	Probability float64
	// Calibrated is the probability after the manifest's calibrator.
	Calibrated float64
	// Method names the calibrator ("identity", "temperature", ...).
	Method string
	// Threshold is the decision threshold on Calibrated.
	Threshold float64
	// Decision is the label name on the side of Threshold that Calibrated
	// falls on.
	Decision string
}

// Result is the outcome of scoring one study. Its JSON form is the public
// result contract (DESIGN.md); field names follow the proto's snake_case.
type Result struct {
	ResultID             string             `json:"result_id"`
	CreatedAt            time.Time          `json:"created_at"`
	StudyInstanceUID     string             `json:"study_instance_uid"`
	SeriesInstanceUID    string             `json:"series_instance_uid"`
	CenterSOPInstanceUID string             `json:"center_sop_instance_uid"`
	Slices               []SliceScore       `json:"slices"`
	SeriesCandidates     []SeriesCandidate  `json:"series_candidates"`
	Model                ModelInfo          `json:"model"`
	RawOutput            float64            `json:"raw_output"`
	Probability          float64            `json:"probability"`
	CalibratedProb       float64            `json:"calibrated_probability"`
	CalibrationMethod    string             `json:"calibration_method"`
	Threshold            float64            `json:"threshold"`
	Decision             string             `json:"decision"`
	QualityFlags         []string           `json:"quality_flags"`
	Notice               string             `json:"notice"`
	TimingsMS            map[string]float64 `json:"timings_ms"`
}
