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
// result contract (docs/ARCHITECTURE.md); field names follow the proto's snake_case.
type Result struct {
	ResultID             string    `json:"result_id"`
	CreatedAt            time.Time `json:"created_at"`
	StudyInstanceUID     string    `json:"study_instance_uid"`
	SeriesInstanceUID    string    `json:"series_instance_uid"`
	CenterSOPInstanceUID string    `json:"center_sop_instance_uid"`
	// CenterFrameNumber is the centre slice's 1-based frame when it is a
	// frame of a multi-frame instance (PS3.3 C.7.6.6); 0 otherwise.
	CenterFrameNumber int          `json:"center_frame_number"`
	Slices            []SliceScore `json:"slices"`
	// MidlineConfidence is the confidence of the midline pick, 0 to 1.
	MidlineConfidence float64           `json:"midline_confidence"`
	SeriesCandidates  []SeriesCandidate `json:"series_candidates"`
	Model             ModelInfo         `json:"model"`
	RawOutput         float64           `json:"raw_output"`
	Probability       float64           `json:"probability"`
	CalibratedProb    float64           `json:"calibrated_probability"`
	CalibrationMethod string            `json:"calibration_method"`
	Threshold         float64           `json:"threshold"`
	Decision          string            `json:"decision"`
	QualityFlags      []string          `json:"quality_flags"`
	// Explanation is set when the Pipeline has an Explainer.
	Explanation *Explanation       `json:"explanation,omitempty"`
	Notice      string             `json:"notice"`
	TimingsMS   map[string]float64 `json:"timings_ms"`
}

// Explanation is a map of where the model's output depends on the input,
// laid over the model's input grid in cells of StridePX x StridePX pixels.
type Explanation struct {
	// Method names how the map was made, e.g. "occlusion" (occlusion
	// sensitivity, Zeiler and Fergus 2014) or "occlusion_coarse_to_fine".
	Method string `json:"method"`
	// Baseline names what an occluded patch was replaced by: "mean",
	// "zero" or "blur".
	Baseline string `json:"baseline"`
	// PatchPX and StridePX are the finest patch side and stride in input
	// pixels.
	PatchPX  int `json:"patch_px"`
	StridePX int `json:"stride_px"`
	GridRows int `json:"grid_rows"`
	GridCols int `json:"grid_cols"`
	// Values are row-major, GridRows x GridCols: the drop in calibrated
	// probability when the cell is occluded (unoccluded minus occluded;
	// positive where the input raised the probability).
	Values []float64 `json:"values"`
	// RawValues are the same drops in the model's raw output.
	RawValues []float64 `json:"raw_values"`
	// Peak is the centre of the highest cell in the centre slice's pixel
	// coordinates; PeakPatientMM is the same point in patient coordinates
	// (LPS, mm; PS3.3 C.7.6.2.1.1).
	Peak          PixelPoint `json:"peak"`
	PeakPatientMM [3]float64 `json:"peak_patient_mm"`
	// PeakCell is the highest cell's grid row and column.
	PeakCell PixelPoint `json:"peak_cell"`
	// ModelRuns counts the inputs the model ran on, the unoccluded one
	// included: the cost in single-input runs whatever the batching.
	ModelRuns int `json:"model_runs"`

	// Picture is what a heatmap image is drawn from. It is not part of
	// the JSON result and is nil on a result read back from JSON.
	Picture *ExplanationPicture `json:"-"`
}

// PixelPoint is a (row, column) position in pixels or grid cells.
type PixelPoint struct {
	Row int `json:"row"`
	Col int `json:"col"`
}

// ExplanationPicture is the centre slice as the model saw it and the map
// at the input's full resolution, with the images the map was made from.
type ExplanationPicture struct {
	// Underlay is the centre channel of the model input (Height x Width).
	Underlay *Image
	// Map holds the per-pixel drop in calibrated probability
	// (Height x Width, row-major): overlapping patches averaged.
	Map []float64
	// Sources are the stacked images, centre first.
	Sources []ImageRef
	// Patient identifies the source study's patient for a derived image;
	// it never reaches JSON (the whole picture is json:"-").
	Patient PatientStudy
}

// ImageRef identifies one DICOM image by its SOP Class and Instance UIDs.
type ImageRef struct {
	SOPClassUID    string
	SOPInstanceUID string
	// FrameNumber is the 1-based frame of a multi-frame image, written as
	// Referenced Frame Number (0008,1160) (PS3.3 Table 10-3); 0 for a
	// single-frame image.
	FrameNumber int
}
