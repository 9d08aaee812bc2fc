package preprocess

// Transfer syntax UIDs (PS3.6 Annex A) that midsag reads.
const (
	ImplicitVRLittleEndian         = "1.2.840.10008.1.2"
	ExplicitVRLittleEndian         = "1.2.840.10008.1.2.1"
	DeflatedExplicitVRLittleEndian = "1.2.840.10008.1.2.1.99"
	ExplicitVRBigEndian            = "1.2.840.10008.1.2.2"
	JPEGBaseline8Bit               = "1.2.840.10008.1.2.4.50"
	JPEGLossless                   = "1.2.840.10008.1.2.4.57"
	JPEGLosslessSV1                = "1.2.840.10008.1.2.4.70"
	RLELossless                    = "1.2.840.10008.1.2.5"
)

// SupportedSyntaxes lists the transfer syntaxes whose pixel data midsag
// decodes, with their names from PS3.6 Annex A.
var SupportedSyntaxes = map[string]string{
	ImplicitVRLittleEndian:         "Implicit VR Little Endian",
	ExplicitVRLittleEndian:         "Explicit VR Little Endian",
	DeflatedExplicitVRLittleEndian: "Deflated Explicit VR Little Endian",
	ExplicitVRBigEndian:            "Explicit VR Big Endian",
	JPEGBaseline8Bit:               "JPEG Baseline (Process 1)",
	JPEGLossless:                   "JPEG Lossless, Non-Hierarchical (Process 14)",
	JPEGLosslessSV1:                "JPEG Lossless, Non-Hierarchical, First-Order Prediction (Process 14 [Selection Value 1])",
	RLELossless:                    "RLE Lossless",
}
