//go:build cgo && charls

package codec

/*
#cgo pkg-config: charls
#include <stdlib.h>
#include <charls/charls.h>

typedef struct { int width, height, comps, bits, near, interleave; } midsag_jls_info;

enum { MIDSAG_JLS_OK, MIDSAG_JLS_NOHEADER, MIDSAG_JLS_MISMATCH, MIDSAG_JLS_NODECODE };

// midsag_jls_decode reads the header, fills info, and decodes into dst
// only when the header matches the expected size and the decoded size
// fits dst; the decoder lives for this one call, so the Go buffers it
// points to are never kept.
static int midsag_jls_decode(const void *src, size_t len, int want_w, int want_h, int want_c, int max_bits,
		void *dst, size_t cap, midsag_jls_info *info) {
	int rc = MIDSAG_JLS_OK;
	size_t need = 0;
	charls_frame_info fi;
	charls_interleave_mode mode;
	int32_t near = 0;
	charls_jpegls_decoder *d = charls_jpegls_decoder_create();
	if (!d) return MIDSAG_JLS_NOHEADER;
	if (charls_jpegls_decoder_set_source_buffer(d, src, len) != CHARLS_JPEGLS_ERRC_SUCCESS ||
			charls_jpegls_decoder_read_header(d) != CHARLS_JPEGLS_ERRC_SUCCESS ||
			charls_jpegls_decoder_get_frame_info(d, &fi) != CHARLS_JPEGLS_ERRC_SUCCESS ||
			charls_jpegls_decoder_get_interleave_mode(d, &mode) != CHARLS_JPEGLS_ERRC_SUCCESS ||
			charls_jpegls_decoder_get_near_lossless(d, 0, &near) != CHARLS_JPEGLS_ERRC_SUCCESS) {
		rc = MIDSAG_JLS_NOHEADER;
		goto done;
	}
	info->width = (int)fi.width;
	info->height = (int)fi.height;
	info->comps = fi.component_count;
	info->bits = fi.bits_per_sample;
	info->near = near;
	info->interleave = (int)mode;
	if (info->width != want_w || info->height != want_h || info->comps != want_c || info->bits < 2 || info->bits > max_bits) {
		rc = MIDSAG_JLS_MISMATCH;
		goto done;
	}
	if (charls_jpegls_decoder_get_destination_size(d, 0, &need) != CHARLS_JPEGLS_ERRC_SUCCESS || need > cap) {
		rc = MIDSAG_JLS_MISMATCH;
		goto done;
	}
	if (charls_jpegls_decoder_decode_to_buffer(d, dst, need, 0) != CHARLS_JPEGLS_ERRC_SUCCESS) rc = MIDSAG_JLS_NODECODE;
done:
	charls_jpegls_decoder_destroy(d);
	return rc;
}
*/
import "C"

import (
	"bytes"
	"encoding/binary"
	"errors"
	"fmt"
	"unsafe"
)

// JPEGLSBuilt reports that this binary decodes JPEG-LS.
const JPEGLSBuilt = true

// DecodeJPEGLS decodes one JPEG-LS frame (ITU-T T.87, lossless or
// near-lossless) with CharLS. The frame header's size, component count and
// bits per sample are checked against want before decoding, into a buffer
// sized from want.
func DecodeJPEGLS(data []byte, want Expect) (*Frame, error) {
	if err := want.check("JPEG-LS", want.Cols, want.Rows, want.Components, 1); err != nil {
		return nil, err
	}
	// A frame ends with EOI (ITU-T T.87 C.1, T.81 B.2.1), then at most
	// the NUL that pads a fragment to even length (PS3.5 A.4). A cut
	// frame is refused here: CharLS 2.4 spends seconds on some cut
	// streams (15 s on a 64x64 frame cut in half) before failing.
	end := bytes.TrimRight(data, "\x00")
	if len(data)-len(end) > 1 || !bytes.HasSuffix(end, []byte{0xFF, 0xD9}) {
		return nil, fmt.Errorf("codec: JPEG-LS frame does not end with an EOI marker: %w", ErrTruncated)
	}
	n := want.Rows * want.Cols * want.Components
	// CharLS writes one byte per sample up to 8 bits and two above
	// (native byte order), so two bytes a sample always suffice.
	dst := make([]byte, 2*n)
	var info C.midsag_jls_info
	rc := C.midsag_jls_decode(unsafe.Pointer(&data[0]), C.size_t(len(data)), C.int(want.Cols), C.int(want.Rows),
		C.int(want.Components), C.int(min(want.BitsAllocated, 16)), unsafe.Pointer(&dst[0]), C.size_t(len(dst)), &info)
	switch rc {
	case C.MIDSAG_JLS_OK:
	case C.MIDSAG_JLS_NOHEADER:
		return nil, errors.New("codec: JPEG-LS frame header does not parse")
	case C.MIDSAG_JLS_MISMATCH:
		if err := want.check("JPEG-LS", int(info.width), int(info.height), int(info.comps), int(info.bits)); err != nil {
			return nil, err
		}
		return nil, errors.New("codec: JPEG-LS frame does not match the DICOM header")
	default:
		return nil, errors.New("codec: JPEG-LS frame is corrupt or truncated")
	}
	f := &Frame{Width: want.Cols, Height: want.Rows, Components: want.Components, Precision: int(info.bits),
		Near: int(info.near), Samples: make([]int32, n)}
	for i := range f.Samples {
		if info.bits <= 8 {
			f.Samples[i] = int32(dst[i])
		} else {
			f.Samples[i] = int32(binary.NativeEndian.Uint16(dst[2*i:]))
		}
	}
	// Interleave mode none stores one plane per component (ITU-T T.87
	// B.2.3); Frame is interleaved by pixel.
	if info.interleave == C.CHARLS_INTERLEAVE_MODE_NONE && want.Components > 1 {
		planes := f.Samples
		f.Samples = make([]int32, n)
		px := want.Rows * want.Cols
		for c := 0; c < want.Components; c++ {
			for p := 0; p < px; p++ {
				f.Samples[p*want.Components+c] = planes[c*px+p]
			}
		}
	}
	return f, nil
}
