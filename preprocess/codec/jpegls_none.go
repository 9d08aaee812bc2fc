//go:build !(cgo && charls)

package codec

// JPEGLSBuilt reports that this binary decodes JPEG-LS: it was built
// without the charls tag (or without cgo).
const JPEGLSBuilt = false

// DecodeJPEGLS refuses: this binary was built without CharLS.
func DecodeJPEGLS(data []byte, want Expect) (*Frame, error) {
	e := JPEGLSLibrary
	return nil, &e
}
