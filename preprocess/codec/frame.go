package codec

import (
	"bytes"
	"compress/flate"
	"errors"
	"fmt"
	"io"
)

// Frame is one frame decoded from a JPEG 2000 or JPEG-LS codestream, its
// samples interleaved by pixel (R G B R G B ... for three components).
type Frame struct {
	// Width, Height and Components are the codestream's image size.
	Width, Height, Components int
	// Precision is the codestream's bits per sample.
	Precision int
	// Signed is set when JPEG 2000 samples are signed (ITU-T T.800 A.5.1,
	// Ssiz); JPEG-LS samples are never signed.
	Signed bool
	// Near is the JPEG-LS NEAR parameter (ITU-T T.87 C.2.3): every sample
	// is within Near of the original, and 0 is lossless.
	Near int
	// Samples holds Width*Height*Components values.
	Samples []int32
}

// Expect is what the DICOM header says a frame holds (PS3.3 C.7.6.3).
// Decoders check the codestream's own header against it before they
// decode, so the allocation is bounded by the DICOM header, which the
// reader has already checked against its limits.
type Expect struct {
	Rows, Cols, Components int
	// BitsAllocated bounds the codestream's precision.
	BitsAllocated int
}

// check compares a codestream header with the DICOM header. Only the cgo
// decoders call it, so a build without their tags does not.
//
//lint:ignore U1000 used by jpeg2000_openjpeg.go and jpegls_charls.go (build tags openjpeg, charls)
func (e Expect) check(kind string, width, height, components, precision int) error {
	switch {
	case e.Rows <= 0 || e.Cols <= 0 || e.Components <= 0:
		return fmt.Errorf("codec: %s: header gives no image size", kind)
	case e.Rows*e.Cols*e.Components > MaxSamples:
		return ErrTooLarge
	case width != e.Cols || height != e.Rows || components != e.Components:
		return fmt.Errorf("codec: %s codestream is %dx%dx%d but the DICOM header says %dx%dx%d",
			kind, width, height, components, e.Cols, e.Rows, e.Components)
	case precision < 1 || precision > e.BitsAllocated || precision > 16:
		return fmt.Errorf("codec: %s codestream has %d-bit samples, more than the %d bits allocated", kind, precision, e.BitsAllocated)
	}
	return nil
}

// NotBuiltError reports a codec this binary was built without.
type NotBuiltError struct {
	// Codec names the compression, e.g. "JPEG 2000".
	Codec string
	// Package is the Debian package with the C library and its headers.
	Package string
	// Tag is the Go build tag that compiles the codec in.
	Tag string
}

func (e *NotBuiltError) Error() string {
	return fmt.Sprintf("this midsag binary was built without the %s decoder; install the Debian package %s and rebuild with `make build` (it sets the build tag when pkg-config finds the library) or `go build -tags %s ./cmd/midsag`",
		e.Codec, e.Package, e.Tag)
}

// JPEG2000Library and JPEGLSLibrary say what builds the two cgo codecs.
var (
	JPEG2000Library = NotBuiltError{Codec: "JPEG 2000 (OpenJPEG)", Package: "libopenjp2-7-dev", Tag: "openjpeg"}
	JPEGLSLibrary   = NotBuiltError{Codec: "JPEG-LS (CharLS)", Package: "libcharls-dev", Tag: "charls"}
)

// InflateFrame inflates one frame of Deflated Image Frame Compression:
// the frame's native pixel bytes compressed with raw Deflate (RFC 1951),
// one frame per fragment, with a trailing NUL pad when the deflated length
// is odd (PS3.5 A.4.13). It returns exactly size bytes; a stream that
// inflates to fewer is ErrTruncated, one that inflates to more is refused
// after size+1 bytes, so a deflate bomb never allocates beyond the frame.
func InflateFrame(frame []byte, size int) ([]byte, error) {
	if size <= 0 || size > 4*MaxSamples {
		return nil, ErrTooLarge
	}
	r := flate.NewReader(bytes.NewReader(frame))
	defer r.Close()
	out := make([]byte, size)
	if _, err := io.ReadFull(r, out); err != nil {
		if errors.Is(err, io.EOF) || errors.Is(err, io.ErrUnexpectedEOF) {
			return nil, fmt.Errorf("deflated frame: %w", ErrTruncated)
		}
		return nil, fmt.Errorf("deflated frame: %w", err)
	}
	var extra [1]byte
	if n, _ := r.Read(extra[:]); n > 0 {
		return nil, fmt.Errorf("codec: deflated frame inflates to more than the %d bytes of one frame", size)
	}
	return out, nil
}
