package preprocess

import "github.com/midsag/midsag"

// SupportedSyntaxes lists the transfer syntaxes whose pixel data midsag
// decodes, with their names from PS3.6 Annex A.
var SupportedSyntaxes = map[string]string{
	midsag.ImplicitVRLittleEndian:         "Implicit VR Little Endian",
	midsag.ExplicitVRLittleEndian:         "Explicit VR Little Endian",
	midsag.DeflatedExplicitVRLittleEndian: "Deflated Explicit VR Little Endian",
	midsag.ExplicitVRBigEndian:            "Explicit VR Big Endian",
	midsag.JPEGBaseline8Bit:               "JPEG Baseline (Process 1)",
	midsag.JPEGLossless:                   "JPEG Lossless, Non-Hierarchical (Process 14)",
	midsag.JPEGLosslessSV1:                "JPEG Lossless, Non-Hierarchical, First-Order Prediction (Process 14 [Selection Value 1])",
	midsag.RLELossless:                    "RLE Lossless",
}
