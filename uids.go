package midsag

import (
	"crypto/rand"
	"math/big"
	"strings"
)

// DICOM UIDs midsag reads and writes, one source for every package.

// Transfer syntax UIDs (PS3.5 Section 10 and Annex A; PS3.6 Annex A).
const (
	// ImplicitVRLittleEndian is the default DICOM transfer syntax (PS3.5 A.1).
	ImplicitVRLittleEndian = "1.2.840.10008.1.2"
	// ExplicitVRLittleEndian is Explicit VR Little Endian (PS3.5 A.2).
	ExplicitVRLittleEndian = "1.2.840.10008.1.2.1"
	// DeflatedExplicitVRLittleEndian is Deflated Explicit VR Little Endian
	// (PS3.5 A.5).
	DeflatedExplicitVRLittleEndian = "1.2.840.10008.1.2.1.99"
	// ExplicitVRBigEndian is the retired Explicit VR Big Endian (PS3.5 A.3).
	ExplicitVRBigEndian = "1.2.840.10008.1.2.2"
	// JPEGBaseline8Bit is JPEG Baseline (Process 1) (PS3.5 A.4.1).
	JPEGBaseline8Bit = "1.2.840.10008.1.2.4.50"
	// JPEGLossless is JPEG Lossless, Non-Hierarchical (Process 14).
	JPEGLossless = "1.2.840.10008.1.2.4.57"
	// JPEGLosslessSV1 is JPEG Lossless, Non-Hierarchical, First-Order
	// Prediction (Process 14, Selection Value 1) (PS3.5 A.4.1).
	JPEGLosslessSV1 = "1.2.840.10008.1.2.4.70"
	// RLELossless is RLE Lossless (PS3.5 A.4.2, Annex G).
	RLELossless = "1.2.840.10008.1.2.5"
	// JPEGExtended12Bit is JPEG Extended (Process 2 & 4), 8- or 12-bit
	// lossy JPEG (PS3.5 A.4.1).
	JPEGExtended12Bit = "1.2.840.10008.1.2.4.51"
	// JPEGLSLossless is JPEG-LS Lossless Image Compression (PS3.5 A.4.3).
	JPEGLSLossless = "1.2.840.10008.1.2.4.80"
	// JPEGLSNearLossless is JPEG-LS Lossy (Near-Lossless) Image
	// Compression (PS3.5 A.4.3).
	JPEGLSNearLossless = "1.2.840.10008.1.2.4.81"
	// JPEG2000Lossless is JPEG 2000 Image Compression (Lossless Only)
	// (PS3.5 A.4.4).
	JPEG2000Lossless = "1.2.840.10008.1.2.4.90"
	// JPEG2000 is JPEG 2000 Image Compression, lossless or lossy
	// (PS3.5 A.4.4).
	JPEG2000 = "1.2.840.10008.1.2.4.91"
	// DeflatedImageFrameCompression is Deflated Image Frame Compression:
	// each frame deflated (RFC 1951) into one fragment (PS3.5 A.4.13,
	// 8.2.16).
	DeflatedImageFrameCompression = "1.2.840.10008.1.2.8.1"
)

// Storage SOP Class UIDs (PS3.4 B.5, PS3.6 Table A-1).
const (
	MRImageStorage               = "1.2.840.10008.5.1.4.1.1.4"
	EnhancedMRImageStorage       = "1.2.840.10008.5.1.4.1.1.4.1"
	SecondaryCaptureImageStorage = "1.2.840.10008.5.1.4.1.1.7"
	// LegacyConvertedEnhancedMRImageStorage holds single-frame MR images
	// converted into one multi-frame instance (PS3.3 A.71).
	LegacyConvertedEnhancedMRImageStorage = "1.2.840.10008.5.1.4.1.1.4.4"
	// ComprehensiveSRStorage is Comprehensive SR Storage (PS3.3 A.35.3),
	// the class of the reports midsag writes.
	ComprehensiveSRStorage = "1.2.840.10008.5.1.4.1.1.88.33"
)

// IsMRImageStorage reports whether a Storage SOP Class holds MR images
// midsag scores: MR, Enhanced MR and Legacy Converted Enhanced MR
// (PS3.4 B.5). Instances of every other class are stored, not scored.
func IsMRImageStorage(sopClassUID string) bool {
	switch sopClassUID {
	case MRImageStorage, EnhancedMRImageStorage, LegacyConvertedEnhancedMRImageStorage:
		return true
	}
	return false
}

// ImplementationClassUID identifies midsag's DICOM implementation in
// association negotiation (PS3.7 D.3.3.2) and in File Meta Information of
// the files it writes. It is a 2.25 UUID-derived UID (PS3.5 B.2) drawn once
// for midsag.
const ImplementationClassUID = "2.25.163754905504511878491646896874482852857"

// ImplementationVersionName is midsag's Implementation Version Name
// (PS3.7 D.3.3.2.3, at most 16 characters).
const ImplementationVersionName = "MIDSAG_0.1"

// OutputUIDRoot is the root of every UID midsag makes for its own outputs
// (the Secondary Capture map, the Structured Report, their series): the
// implementation class UID, which midsag owns, with ".1" (PS3.5 9.1: an
// organisation extends a root it holds). The DICOM listener recognises an
// instance by this root and never stores or scores it again, so a PACS
// rule that forwards everything back to midsag does not loop.
const OutputUIDRoot = ImplementationClassUID + ".1"

// NewOutputUID returns a new UID under OutputUIDRoot, completed with 50
// random bits in decimal to at most 64 characters (PS3.5 9.1).
func NewOutputUID() string {
	n, _ := rand.Int(rand.Reader, new(big.Int).Lsh(big.NewInt(1), 50))
	// A component other than "0" has no leading zero (PS3.5 9.1).
	return OutputUIDRoot + "." + new(big.Int).Add(n, big.NewInt(1)).String()
}

// IsOutputUID reports whether uid was made by NewOutputUID.
func IsOutputUID(uid string) bool {
	return strings.HasPrefix(uid, OutputUIDRoot+".")
}
