package preprocess

import (
	"github.com/midsag/midsag"
	"github.com/midsag/midsag/preprocess/codec"
)

// SupportedSyntaxes lists the transfer syntaxes whose pixel data this
// binary decodes, with their names from PS3.6 Annex A. JPEG 2000 and
// JPEG-LS are listed only when the binary was built with their codecs
// (build tags openjpeg and charls); NeedRebuild lists them otherwise.
var SupportedSyntaxes = map[string]string{}

// NeedRebuild lists the transfer syntaxes midsag can decode but this
// binary was built without, with the library that adds them.
var NeedRebuild = map[string]codec.NotBuiltError{}

// syntaxNames names every transfer syntax midsag knows (PS3.6 Annex A).
var syntaxNames = map[string]string{
	midsag.ImplicitVRLittleEndian:         "Implicit VR Little Endian",
	midsag.ExplicitVRLittleEndian:         "Explicit VR Little Endian",
	midsag.DeflatedExplicitVRLittleEndian: "Deflated Explicit VR Little Endian",
	midsag.ExplicitVRBigEndian:            "Explicit VR Big Endian",
	midsag.JPEGBaseline8Bit:               "JPEG Baseline (Process 1)",
	midsag.JPEGExtended12Bit:              "JPEG Extended (Process 2 & 4), 8-bit samples only",
	midsag.JPEGLossless:                   "JPEG Lossless, Non-Hierarchical (Process 14)",
	midsag.JPEGLosslessSV1:                "JPEG Lossless, Non-Hierarchical, First-Order Prediction (Process 14 [Selection Value 1])",
	midsag.RLELossless:                    "RLE Lossless",
	midsag.DeflatedImageFrameCompression:  "Deflated Image Frame Compression",
	midsag.JPEGLSLossless:                 "JPEG-LS Lossless Image Compression",
	midsag.JPEGLSNearLossless:             "JPEG-LS Lossy (Near-Lossless) Image Compression",
	midsag.JPEG2000Lossless:               "JPEG 2000 Image Compression (Lossless Only)",
	midsag.JPEG2000:                       "JPEG 2000 Image Compression",
}

func init() {
	cgoCodec := map[string]struct {
		built bool
		lib   codec.NotBuiltError
	}{
		midsag.JPEGLSLossless:     {codec.JPEGLSBuilt, codec.JPEGLSLibrary},
		midsag.JPEGLSNearLossless: {codec.JPEGLSBuilt, codec.JPEGLSLibrary},
		midsag.JPEG2000Lossless:   {codec.JPEG2000Built, codec.JPEG2000Library},
		midsag.JPEG2000:           {codec.JPEG2000Built, codec.JPEG2000Library},
	}
	for uid, name := range syntaxNames {
		if c, ok := cgoCodec[uid]; ok && !c.built {
			NeedRebuild[uid] = c.lib
			continue
		}
		SupportedSyntaxes[uid] = name
	}
}
