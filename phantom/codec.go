package phantom

import "fmt"

// encapsulatedSyntaxes lists the compressed transfer syntaxes the writer
// can produce; none until encoders are available.
func encapsulatedSyntaxes() []string { return nil }

// isEncapsulated reports whether ts stores pixel data in fragments
// (PS3.5 A.4).
func isEncapsulated(ts string) bool {
	return ts == RLELossless || ts == JPEGLosslessSV1
}

// encodeFrame compresses one frame for an encapsulated transfer syntax.
func encodeFrame(ts string, pix []uint16, rows, cols, bitsStored int) ([]byte, error) {
	return nil, fmt.Errorf("transfer syntax %s: no encoder", ts)
}
