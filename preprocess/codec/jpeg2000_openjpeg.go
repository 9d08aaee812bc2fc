//go:build cgo && openjpeg

package codec

/*
#cgo pkg-config: libopenjp2
#include <stdlib.h>
#include <string.h>
#include <openjpeg.h>

// A read-only memory stream for OpenJPEG; it lives for one call of
// midsag_j2k_decode, so the Go buffer it points to is never kept.
typedef struct { const unsigned char *data; OPJ_SIZE_T size, pos; } midsag_mem;

static OPJ_SIZE_T midsag_mem_read(void *buf, OPJ_SIZE_T n, void *user) {
	midsag_mem *m = user;
	if (m->pos >= m->size) return (OPJ_SIZE_T)-1;
	if (n > m->size - m->pos) n = m->size - m->pos;
	memcpy(buf, m->data + m->pos, n);
	m->pos += n;
	return n;
}

static OPJ_OFF_T midsag_mem_skip(OPJ_OFF_T n, void *user) {
	midsag_mem *m = user;
	if (n < 0) return -1;
	if ((OPJ_SIZE_T)n > m->size - m->pos) n = (OPJ_OFF_T)(m->size - m->pos);
	m->pos += (OPJ_SIZE_T)n;
	return n;
}

static OPJ_BOOL midsag_mem_seek(OPJ_OFF_T n, void *user) {
	midsag_mem *m = user;
	if (n < 0 || (OPJ_SIZE_T)n > m->size) return OPJ_FALSE;
	m->pos = (OPJ_SIZE_T)n;
	return OPJ_TRUE;
}

static void midsag_quiet(const char *msg, void *user) { (void)msg; (void)user; }

typedef struct { int width, height, comps, prec, sgnd, subsampled; } midsag_j2k_info;

enum { MIDSAG_J2K_OK, MIDSAG_J2K_NOHEADER, MIDSAG_J2K_MISMATCH, MIDSAG_J2K_NODECODE, MIDSAG_J2K_NODATA };

// midsag_j2k_decode reads the header, fills info, and decodes only when
// the header matches the expected size (so the image allocated is the one
// the DICOM header announced). *out is set on success and on MISMATCH
// left NULL.
static int midsag_j2k_decode(const unsigned char *data, size_t len, int jp2,
		int want_w, int want_h, int want_c, int max_prec,
		midsag_j2k_info *info, opj_image_t **out) {
	midsag_mem m = { data, len, 0 };
	opj_dparameters_t params;
	opj_image_t *img = NULL;
	int rc = MIDSAG_J2K_OK;
	*out = NULL;
	memset(info, 0, sizeof *info);
	opj_codec_t *codec = opj_create_decompress(jp2 ? OPJ_CODEC_JP2 : OPJ_CODEC_J2K);
	if (!codec) return MIDSAG_J2K_NOHEADER;
	opj_set_info_handler(codec, midsag_quiet, NULL);
	opj_set_warning_handler(codec, midsag_quiet, NULL);
	opj_set_error_handler(codec, midsag_quiet, NULL);
	opj_set_default_decoder_parameters(&params);
	opj_stream_t *s = opj_stream_create(1 << 16, OPJ_TRUE);
	if (!s) { opj_destroy_codec(codec); return MIDSAG_J2K_NOHEADER; }
	opj_stream_set_user_data(s, &m, NULL);
	opj_stream_set_user_data_length(s, len);
	opj_stream_set_read_function(s, midsag_mem_read);
	opj_stream_set_skip_function(s, midsag_mem_skip);
	opj_stream_set_seek_function(s, midsag_mem_seek);
	if (!opj_setup_decoder(codec, &params) || !opj_decoder_set_strict_mode(codec, OPJ_TRUE) ||
			!opj_read_header(s, codec, &img) || img == NULL || img->numcomps == 0) {
		rc = MIDSAG_J2K_NOHEADER;
		goto done;
	}
	info->width = (int)(img->x1 - img->x0);
	info->height = (int)(img->y1 - img->y0);
	info->comps = (int)img->numcomps;
	info->prec = (int)img->comps[0].prec;
	info->sgnd = (int)img->comps[0].sgnd;
	for (OPJ_UINT32 i = 0; i < img->numcomps; i++) {
		opj_image_comp_t *c = &img->comps[i];
		if (c->dx != 1 || c->dy != 1 || (int)c->prec != info->prec || (int)c->sgnd != info->sgnd) info->subsampled = 1;
	}
	if (info->width != want_w || info->height != want_h || info->comps != want_c ||
			info->prec < 1 || info->prec > max_prec || info->subsampled) {
		rc = MIDSAG_J2K_MISMATCH;
		goto done;
	}
	if (!opj_decode(codec, s, img) || !opj_end_decompress(codec, s)) {
		rc = MIDSAG_J2K_NODECODE;
		goto done;
	}
	for (OPJ_UINT32 i = 0; i < img->numcomps; i++) {
		opj_image_comp_t *c = &img->comps[i];
		if (c->data == NULL || (int)c->w != want_w || (int)c->h != want_h) { rc = MIDSAG_J2K_NODATA; goto done; }
	}
	*out = img;
	img = NULL;
done:
	if (img) opj_image_destroy(img);
	opj_stream_destroy(s);
	opj_destroy_codec(codec);
	return rc;
}
*/
import "C"

import (
	"bytes"
	"errors"
	"fmt"
	"unsafe"
)

// JPEG2000Built reports that this binary decodes JPEG 2000.
const JPEG2000Built = true

// jp2Signature starts a JP2 file (ITU-T T.800 I.5.1); DICOM asks for a
// bare codestream (PS3.5 A.4.4), but some encoders wrap it.
var jp2Signature = []byte{0, 0, 0, 0x0c, 'j', 'P', ' ', ' ', 0x0d, 0x0a, 0x87, 0x0a}

// DecodeJPEG2000 decodes one JPEG 2000 Part 1 frame (ITU-T T.800) with
// OpenJPEG. The codestream's image size, component count and precision
// are checked against want before any sample is decoded; OpenJPEG runs in
// strict mode, so a truncated codestream is an error rather than a
// partly decoded image.
func DecodeJPEG2000(data []byte, want Expect) (*Frame, error) {
	if err := want.check("JPEG 2000", want.Cols, want.Rows, want.Components, 1); err != nil {
		return nil, err
	}
	if len(data) < 2 {
		return nil, fmt.Errorf("codec: JPEG 2000 frame: %w", ErrTruncated)
	}
	jp2 := C.int(0)
	if bytes.HasPrefix(data, jp2Signature) {
		jp2 = 1
	}
	maxPrec := min(want.BitsAllocated, 16)
	var info C.midsag_j2k_info
	var img *C.opj_image_t
	rc := C.midsag_j2k_decode((*C.uchar)(unsafe.Pointer(&data[0])), C.size_t(len(data)), jp2,
		C.int(want.Cols), C.int(want.Rows), C.int(want.Components), C.int(maxPrec), &info, &img)
	switch rc {
	case C.MIDSAG_J2K_OK:
	case C.MIDSAG_J2K_NOHEADER:
		return nil, errors.New("codec: JPEG 2000 codestream header does not parse")
	case C.MIDSAG_J2K_MISMATCH:
		if info.subsampled != 0 {
			return nil, errors.New("codec: JPEG 2000 components are subsampled or differ in precision; DICOM frames have equal components (PS3.5 A.4.4)")
		}
		if err := want.check("JPEG 2000", int(info.width), int(info.height), int(info.comps), int(info.prec)); err != nil {
			return nil, err
		}
		return nil, errors.New("codec: JPEG 2000 codestream does not match the DICOM header")
	default:
		return nil, errors.New("codec: JPEG 2000 codestream is corrupt or truncated")
	}
	defer C.opj_image_destroy(img)
	n := want.Rows * want.Cols
	comps := unsafe.Slice(img.comps, int(img.numcomps))
	f := &Frame{Width: want.Cols, Height: want.Rows, Components: want.Components, Precision: int(info.prec),
		Signed: info.sgnd != 0, Samples: make([]int32, n*want.Components)}
	for c := range comps {
		src := unsafe.Slice((*int32)(unsafe.Pointer(comps[c].data)), n)
		for p, v := range src {
			f.Samples[p*want.Components+c] = v
		}
	}
	return f, nil
}
