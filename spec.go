package midsag

// InputSpec describes the tensor a model expects and how to build it from a
// series; models derive it from a model's manifest.
type InputSpec struct {
	// Layout is "NCHW" or "NHWC".
	Layout string
	// Height and Width are the spatial size of the input in pixels.
	Height, Width int
	// Slices is the number of sagittal slices stacked as channels (odd; the
	// centre slice sits in the middle channel).
	Slices int
	// SliceStep is the distance between stacked slices, in slices of the
	// series (1 = adjacent slices).
	SliceStep int
	// Normalize selects "percentile" (clip to [PercentileLow,
	// PercentileHigh] of the stack, then scale to [0,1]) or "meanstd"
	// ((x - Mean[c]) / Std[c] after scaling the percentile range to [0,1]).
	Normalize      string
	PercentileLow  float64
	PercentileHigh float64
	Mean, Std      []float64
	// PixelSpacingMM, when positive, resamples the slice to this isotropic
	// in-plane spacing before fitting it to Height x Width; when zero the
	// slice is scaled to fit with its aspect ratio kept.
	PixelSpacingMM float64
}

// Tensor is a dense float32 tensor with its shape.
type Tensor struct {
	Shape []int64
	Data  []float32
}

// SliceScore is one slice of the picked series with its midline score.
type SliceScore struct {
	SOPInstanceUID string `json:"sop_instance_uid"`
	// FrameNumber is the slice's 1-based frame in a multi-frame instance
	// (PS3.3 C.7.6.6), so that SOP Instance UID and frame name the slice;
	// 0 for a single-frame instance.
	FrameNumber    int     `json:"frame_number"`
	InstanceNumber int     `json:"instance_number"`
	PositionMM     float64 `json:"position_mm"`
	MidlineScore   float64 `json:"midline_score"`
	// Parts break the midline score into its terms, for inspection.
	Parts map[string]float64 `json:"parts,omitempty"`
	// InStack is true for the slices fed to the model.
	InStack bool `json:"in_stack,omitempty"`
}

// SeriesCandidate is one series of the study with its target score and the
// reasons behind it.
type SeriesCandidate struct {
	SeriesInstanceUID string   `json:"series_instance_uid"`
	SeriesNumber      int      `json:"series_number,omitempty"`
	Description       string   `json:"description"`
	Instances         int      `json:"instances"`
	Score             float64  `json:"score"`
	Picked            bool     `json:"picked,omitempty"`
	Reasons           []string `json:"reasons"`
}

// Prepared is what preprocessing hands to the model: the picked series and
// slices, the input tensor, and what was found along the way.
type Prepared struct {
	StudyInstanceUID     string
	SeriesInstanceUID    string
	CenterSOPInstanceUID string
	// CenterFrameNumber is the centre slice's 1-based frame in a
	// multi-frame instance; 0 for a single-frame instance.
	CenterFrameNumber int
	Candidates        []SeriesCandidate
	Slices            []SliceScore
	// MidlineConfidence is the confidence of the midline pick, 0 to 1.
	MidlineConfidence float64
	Input             *Tensor
	QualityFlags      []string
	// TimingsMS holds per-step durations (read excluded).
	TimingsMS map[string]float64
}
