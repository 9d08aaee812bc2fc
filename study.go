package midsag

// Instance is one DICOM composite instance (one image) as read from its
// header, with its pixel data kept undecoded until its series is picked.
type Instance struct {
	// Source names where the instance came from (a path, a zip entry, an
	// upload part); never shown with patient data.
	Source string

	SOPClassUID       string
	SOPInstanceUID    string
	StudyInstanceUID  string
	SeriesInstanceUID string
	TransferSyntaxUID string
	Modality          string
	SeriesNumber      int
	SeriesDescription string
	InstanceNumber    int
	// ImageType is Image Type (0008,0008), e.g. ORIGINAL\PRIMARY\M.
	ImageType []string
	// DerivationDescription is Derivation Description (0008,2111) and
	// DerivationCodes the "scheme:value" codes of the Derivation Code
	// Sequence (0008,9215), e.g. "DCM:113040" (Lossy Compression); they say
	// how a DERIVED image was derived (PS3.3 C.7.6.1.1.3).
	DerivationDescription string
	DerivationCodes       []string

	// ImageOrientation is Image Orientation (Patient) (0020,0037): row then
	// column direction cosines. HasGeometry is false when it or Image
	// Position (Patient) is missing.
	ImageOrientation [6]float64
	// ImagePosition is Image Position (Patient) (0020,0032) in mm.
	ImagePosition [3]float64
	HasGeometry   bool
	// PixelSpacing is (row spacing, column spacing) in mm, PS3.3 10.7.1.3;
	// HasPixelSpacing is false when Pixel Spacing (0028,0030) is absent.
	PixelSpacing         [2]float64
	HasPixelSpacing      bool
	SliceThickness       float64
	SpacingBetweenSlices float64

	// MR acquisition attributes (PS3.3 C.8.3.1); zero when absent.
	RepetitionTime   float64
	EchoTime         float64
	InversionTime    float64
	ScanningSequence []string
	SequenceVariant  []string
	MagneticField    float64
	// MRAcquisitionType is MR Acquisition Type (0018,0023): 2D or 3D.
	MRAcquisitionType string
	// FlipAngle is Flip Angle (0018,1314) in degrees.
	FlipAngle float64
	// SequenceName is Sequence Name (0018,0024), PulseSequenceName Pulse
	// Sequence Name (0018,9005) and EchoPulseSequence Echo Pulse Sequence
	// (0018,9008: SPIN, GRADIENT or BOTH) of the Enhanced MR modules.
	SequenceName      string
	PulseSequenceName string
	EchoPulseSequence string
	// EchoPlanarPulseSequence is Echo Planar Pulse Sequence (0018,9018):
	// YES or NO (PS3.3 C.8.13.5.1).
	EchoPlanarPulseSequence string
	// DiffusionBValue is Diffusion b-value (0018,9087) in s/mm2;
	// HasDiffusionBValue tells an absent value from b = 0.
	DiffusionBValue    float64
	HasDiffusionBValue bool
	// LossyImageCompression is Lossy Image Compression (0028,2110): "00"
	// or "01" (PS3.3 C.7.6.1.1.5).
	LossyImageCompression string
	// LossyImageCompressionMethod is (0028,2114), e.g. ISO_10918_1 or
	// ISO_15444_1 (PS3.3 C.7.6.1.1.5.1).
	LossyImageCompressionMethod []string
	// AcquisitionNumber is (0020,0012); ImagesInAcquisition is Images in
	// Acquisition (0020,1002), zero when absent.
	AcquisitionNumber   int
	ImagesInAcquisition int

	Rows, Columns  int
	NumberOfFrames int
	// Frame is the 0-based frame of the source instance's pixel data this
	// Instance stands for. A multi-frame instance is read as one Instance
	// per frame (PS3.3 C.7.6.16), each with the frame's own geometry.
	Frame int
	// StackID and InStackPosition are Stack ID (0020,9056) and In-Stack
	// Position Number (0020,9057) of the frame's Frame Content (PS3.3
	// C.7.6.16.2.2); empty and zero for single-frame instances.
	StackID         string
	InStackPosition int
	// DimensionIndex is Dimension Index Values (0020,9157) of the frame's
	// Frame Content (PS3.3 C.7.6.16.2.2); nil for single-frame instances.
	DimensionIndex []int
	// PerFrame holds, for a multi-frame Enhanced MR or Legacy Converted
	// Enhanced MR instance as read, the attributes of each frame from its
	// Shared and Per-frame Functional Groups (PS3.3 C.7.6.16), in frame
	// order. Frames expands the instance into one Instance per frame;
	// the expanded Instances have PerFrame nil.
	PerFrame []FrameAttrs
	// FrameOffsets are the byte offsets of each frame's first fragment
	// item, relative to the first fragment's item tag, from the Extended
	// Offset Table (7FE0,0001) or the Basic Offset Table (PS3.5 A.4);
	// nil when the table is empty or the pixel data is native.
	FrameOffsets []uint64
	// expanded marks an Instance made by Frames, so that it is never
	// expanded again.
	expanded bool

	SamplesPerPixel           int
	BitsAllocated, BitsStored int
	HighBit                   int
	PixelRepresentation       int
	Photometric               string
	RescaleSlope              float64
	RescaleIntercept          float64
	PlanarConfiguration       int

	// Patient and study identification, kept only so that derived objects
	// (the heatmap's Secondary Capture) are filed under the same patient
	// and study. Never logged and never written into a Result.
	Patient PatientStudy

	// PixelData holds native (uncompressed) pixel data bytes in the byte
	// order of the transfer syntax; Fragments holds encapsulated frames.
	PixelData []byte
	Fragments [][]byte
}

// Series is the instances of one Series Instance UID.
type Series struct {
	SeriesInstanceUID string
	SeriesNumber      int
	Description       string
	Instances         []*Instance
}

// Study is the series of one Study Instance UID.
type Study struct {
	StudyInstanceUID string
	Series           []*Series
}

// Image is one decoded frame in modality units (rescale applied,
// MONOCHROME1 inverted), row-major.
type Image struct {
	Rows, Columns int
	Pix           []float32
}

// PatientStudy is the Patient and General Study module attributes (PS3.3
// C.7.1.1, C.7.2.1) a derived image in the same study must repeat.
type PatientStudy struct {
	PatientName, PatientID, PatientBirthDate, PatientSex string
	StudyDate, StudyTime, StudyID, AccessionNumber       string
	ReferringPhysicianName                               string
}
