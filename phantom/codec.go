package phantom

import (
	"encoding/binary"
	"fmt"

	"github.com/midsag/midsag"
	"github.com/midsag/midsag/preprocess/codec"
)

// encapsulatedSyntaxes lists the compressed transfer syntaxes the writer
// produces with the project's own lossless encoders.
func encapsulatedSyntaxes() []string { return []string{midsag.RLELossless, midsag.JPEGLosslessSV1} }

// isEncapsulated reports whether ts stores pixel data in fragments
// (PS3.5 A.4).
func isEncapsulated(ts string) bool {
	return ts == midsag.RLELossless || ts == midsag.JPEGLosslessSV1
}

// encodeFrame compresses one frame, one fragment per frame, for an
// encapsulated transfer syntax.
func encodeFrame(ts string, pix []uint16, rows, cols, bitsStored int) ([]byte, error) {
	switch ts {
	case midsag.RLELossless:
		// RLE segments split the native little-endian bytes (PS3.5 G.2).
		native := make([]byte, 2*len(pix))
		for i, v := range pix {
			binary.LittleEndian.PutUint16(native[2*i:], v)
		}
		b, err := codec.EncodeRLE(native, rows, cols, 1, 16)
		if err != nil {
			return nil, fmt.Errorf("rle encode: %w", err)
		}
		return b, nil
	case midsag.JPEGLosslessSV1:
		// Sample precision is Bits Stored (PS3.5 8.2.1).
		b, err := codec.EncodeJPEGLossless(pix, cols, rows, bitsStored)
		if err != nil {
			return nil, fmt.Errorf("jpeg lossless encode: %w", err)
		}
		return b, nil
	}
	return nil, fmt.Errorf("transfer syntax %s: no encoder", ts)
}
