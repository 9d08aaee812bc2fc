// Package codec decodes the compressed pixel encodings midsag reads from
// DICOM. In pure Go: RLE Lossless (PS3.5 Annex G, transfer syntax
// 1.2.840.10008.1.2.5), JPEG lossless, process 14 (ITU-T T.81 Annex H,
// .4.57 and .4.70), both also encoded, and Deflated Image Frame
// Compression (PS3.5 A.4.13, 1.2.840.10008.1.2.8.1). Through cgo, when
// built with the tags openjpeg and charls: JPEG 2000 Part 1 with OpenJPEG
// (.4.90, .4.91) and JPEG-LS with CharLS (.4.80, .4.81); without a tag
// the decoder returns a *NotBuiltError naming the Debian package.
//
// Callers hand in one frame's bytes (fragments already joined) together with
// the image attributes from the DICOM header, and get native pixel bytes or
// samples back. Every size is checked against the input before memory is
// allocated, so hostile input yields an error rather than a panic or a huge
// allocation. The encoders exist for midsag's synthetic-phantom writer.
package codec

import "errors"

// MaxSamples bounds rows*cols*samplesPerPixel for every image this package
// allocates; larger images are rejected with ErrTooLarge.
const MaxSamples = 1 << 28

// ErrTooLarge reports an image whose dimensions exceed MaxSamples.
var ErrTooLarge = errors.New("codec: image too large")

// ErrTruncated reports input that ends before the image is complete.
var ErrTruncated = errors.New("codec: truncated data")
