//go:build !(cgo && openjpeg)

package codec

// JPEG2000Built reports that this binary decodes JPEG 2000: it was built
// without the openjpeg tag (or without cgo).
const JPEG2000Built = false

// DecodeJPEG2000 refuses: this binary was built without OpenJPEG.
func DecodeJPEG2000(data []byte, want Expect) (*Frame, error) {
	e := JPEG2000Library
	return nil, &e
}
