package codec

import (
	"bytes"
	"errors"
	"fmt"
	"path/filepath"
	"testing"

	"github.com/suyashkumar/dicom/pkg/tag"
)

// sourceImage returns a native test image from pydicom's test files, or a
// variant of MR_small.dcm written to dir:
//   - "MR_small_12bit": MR_small's pixels masked to 12 bits stored, to test
//     a precision below 16;
//   - "cat16": 16-bit unsigned pixels alternating 0 and 32768 with runs of
//     65535, so first-order differences of 32768 occur (the SSSS=16 category
//     of ITU-T T.81 H.1.2.2).
func sourceImage(tb testing.TB, dir, name string) (path string, im *image) {
	tb.Helper()
	switch name {
	case "MR_small_12bit", "cat16":
	default:
		p := pydicomFile(tb, name)
		return p, readImage(tb, p)
	}
	base := readImage(tb, pydicomFile(tb, "MR_small.dcm"))
	s := samplesFromNative(base.interleaved(tb), 16)
	bitsStored := 16
	for i := range s {
		if name == "MR_small_12bit" {
			s[i] &= 0x0FFF
			bitsStored = 12
			continue
		}
		switch {
		case i%7 == 3:
			s[i] = 65535
		case i%2 == 0:
			s[i] = 0
		default:
			s[i] = 32768
		}
	}
	set := map[tag.Tag]int{tag.BitsStored: bitsStored, tag.HighBit: bitsStored - 1, tag.PixelRepresentation: 0}
	p := writeVariant(tb, base, dir, name+".dcm", tsExplicitLE, samplesLE(s), set)
	return p, readImage(tb, p)
}

// losslessBytes returns decoded samples as native bytes for comparison with
// DCMTK's output (8-bit samples as bytes, wider ones little-endian).
func losslessBytes(img *Lossless, bitsAlloc int) []byte {
	if bitsAlloc == 8 {
		out := make([]byte, len(img.Samples))
		for i, v := range img.Samples {
			out[i] = byte(v)
		}
		return out
	}
	return samplesLE(img.Samples)
}

// Source: DCMTK. dcmcjpeg writes JPEG lossless (process 14) codestreams with
// every selection value and with a point transform; our decoder must match
// dcmdjpeg's output bit for bit. Inputs: pydicom's MR_small (16-bit),
// CT_small (16-bit signed, raw bits), SC_rgb_small_odd (8-bit RGB), RGB from
// dcmdrle of SC_rgb_rle (8-bit, 100x100) and the 12-bit and category-16
// variants above.
func TestDecodeJPEGLosslessMatchesDCMTK(t *testing.T) {
	files := []string{"MR_small.dcm", "CT_small.dcm", "SC_rgb_small_odd.dcm", "SC_rgb_rle.dcm", "MR_small_12bit", "cat16"}
	type opt struct {
		name string
		args []string
	}
	opts := []opt{{"e1", []string{"+e1"}}}
	for sv := 1; sv <= 7; sv++ {
		opts = append(opts, opt{fmt.Sprintf("sv%d", sv), []string{"+el", "+sv", fmt.Sprint(sv)}})
	}
	opts = append(opts, opt{"sv6pt2", []string{"+el", "+sv", "6", "+pt", "2"}})
	for _, file := range files {
		for _, o := range opts {
			t.Run(file+"/"+o.name, func(t *testing.T) {
				requireTool(t, "dcmcjpeg")
				dir := t.TempDir()
				src, _ := sourceImage(t, dir, file)
				if file == "SC_rgb_rle.dcm" {
					nat := filepath.Join(dir, "native.dcm")
					run(t, "dcmdrle", src, nat)
					src = nat
				}
				jp := filepath.Join(dir, "jpeg.dcm")
				run(t, "dcmcjpeg", append(append([]string{}, o.args...), src, jp)...)
				ref := filepath.Join(dir, "ref.dcm")
				run(t, "dcmdjpeg", jp, ref)
				enc := readImage(t, jp)
				img, err := DecodeJPEGLossless(enc.encapsulated)
				if err != nil {
					t.Fatal(err)
				}
				if img.Width != enc.cols || img.Height != enc.rows || img.Components != enc.spp {
					t.Fatalf("decoded %dx%dx%d, DICOM says %dx%dx%d", img.Width, img.Height, img.Components, enc.cols, enc.rows, enc.spp)
				}
				want := readImage(t, ref).interleaved(t)
				if got := losslessBytes(img, enc.bitsAlloc); !bytes.Equal(got, want) {
					t.Fatalf("differs from dcmdjpeg: %s", firstDiff(got, want))
				}
			})
		}
	}
}

// Source: DCMTK dcmdjpeg decodes our EncodeJPEGLossless output, wrapped as
// transfer syntax 1.2.840.10008.1.2.4.70 (PS3.5 A.4.1), back to the original
// pixels. Inputs as in TestDecodeJPEGLosslessMatchesDCMTK, single component.
func TestEncodeJPEGLosslessDecodedByDCMTK(t *testing.T) {
	for _, file := range []string{"MR_small.dcm", "CT_small.dcm", "MR_small_12bit", "cat16"} {
		t.Run(file, func(t *testing.T) {
			requireTool(t, "dcmdjpeg")
			dir := t.TempDir()
			_, im := sourceImage(t, dir, file)
			native := im.interleaved(t)
			enc, err := EncodeJPEGLossless(samplesFromNative(native, 16), im.cols, im.rows, im.bitsStored)
			if err != nil {
				t.Fatal(err)
			}
			p := writeVariant(t, im, dir, "ours.dcm", tsJPEGLossless, enc, nil)
			out := filepath.Join(dir, "dec.dcm")
			run(t, "dcmdjpeg", p, out)
			if got := readImage(t, out).interleaved(t); !bytes.Equal(got, native) {
				t.Fatalf("dcmdjpeg output differs: %s", firstDiff(got, native))
			}
			img, err := DecodeJPEGLossless(enc)
			if err != nil {
				t.Fatal(err)
			}
			if got := samplesLE(img.Samples); !bytes.Equal(got, native) {
				t.Fatalf("own round trip differs: %s", firstDiff(got, native))
			}
		})
	}
}

// Source: ITU-T T.81 H.1.2.1 and B.2.4.4, a stream built by hand because no
// reference encoder here writes restart intervals. 4x2 samples, P=8,
// predictor 1, DRI of 4 (one row), Huffman codes 00 (SSSS 0) and 01
// (SSSS 1). Row 0 = 127 128 128 127 gives differences -1 +1 0 -1 from the
// initial prediction 2^(P-1) = 128; row 1 = 129 130 130 131 follows RST0, so
// its first sample is again predicted from 128 (not from Rb = 127), giving
// +1 +1 0 +1. Bits: 010 011 00 010 -> 4C 5F (1-padded), 011 011 00 011 -> 6C
// 7F. Fill bytes (FF FF) before RST0 and a COM segment test marker parsing
// (T.81 B.1.1.2, B.2.4.5).
func TestDecodeJPEGLosslessRestartByHand(t *testing.T) {
	stream := []byte{
		0xFF, 0xD8,
		0xFF, 0xFE, 0x00, 0x05, 'h', 'i', '!',
		0xFF, 0xC3, 0x00, 0x0B, 0x08, 0x00, 0x02, 0x00, 0x04, 0x01, 0x01, 0x11, 0x00,
		0xFF, 0xC4, 0x00, 0x15, 0x00, 0x00, 0x02, 0, 0, 0, 0, 0, 0, 0, 0, 0, 0, 0, 0, 0, 0, 0x00, 0x01,
		0xFF, 0xDD, 0x00, 0x04, 0x00, 0x04,
		0xFF, 0xDA, 0x00, 0x08, 0x01, 0x01, 0x00, 0x01, 0x00, 0x00,
		0x4C, 0x5F, 0xFF, 0xFF, 0xD0, 0x6C, 0x7F,
		0xFF, 0xD9,
	}
	img, err := DecodeJPEGLossless(stream)
	if err != nil {
		t.Fatal(err)
	}
	want := []uint16{127, 128, 128, 127, 129, 130, 130, 131}
	if fmt.Sprint(img.Samples) != fmt.Sprint(want) {
		t.Fatalf("got %v, want %v", img.Samples, want)
	}
	// The same stream with RST1 in place of RST0 breaks the modulo-8
	// sequence of T.81 B.2.1 and must be rejected.
	bad := bytes.Clone(stream)
	bad[bytes.Index(bad, []byte{0xFF, 0xD0})+1] = 0xD1
	if _, err := DecodeJPEGLossless(bad); err == nil {
		t.Fatal("wrong restart marker accepted")
	}
}

// Source: ITU-T T.81 H.1.2.2 (category 16 carries no extra bits) and F.1.2.3
// (0xFF data bytes are followed by a stuffed 0x00); our encoder's output for
// extreme 16-bit values must decode to the same samples with our decoder.
func TestJPEGLosslessRoundTripExtremes(t *testing.T) {
	for _, p := range []int{2, 8, 12, 16} {
		w, h := 37, 11
		s := make([]uint16, w*h)
		maxv := uint16(1<<p - 1)
		for i := range s {
			switch i % 5 {
			case 0:
				s[i] = 0
			case 1:
				s[i] = maxv
			case 2:
				s[i] = maxv / 2
			case 3:
				s[i] = uint16(i*2654435761>>7) & maxv
			default:
				s[i] = maxv/2 + 1
			}
		}
		enc, err := EncodeJPEGLossless(s, w, h, p)
		if err != nil {
			t.Fatalf("P=%d: %v", p, err)
		}
		img, err := DecodeJPEGLossless(enc)
		if err != nil {
			t.Fatalf("P=%d: %v", p, err)
		}
		if img.Precision != p || fmt.Sprint(img.Samples) != fmt.Sprint(s) {
			t.Fatalf("P=%d: round trip differs", p)
		}
	}
}

// Source: ITU-T T.81 B.2.2 (frame header ranges) and H.1 (lossless uses
// SOF3, predictors 1..7); malformed codestreams give errors, never panics.
func TestDecodeJPEGLosslessBadInput(t *testing.T) {
	good, err := EncodeJPEGLossless([]uint16{1, 2, 3, 4, 5, 6}, 3, 2, 8)
	if err != nil {
		t.Fatal(err)
	}
	if _, err := DecodeJPEGLossless(good); err != nil {
		t.Fatalf("control stream: %v", err)
	}
	sof := bytes.Index(good, []byte{0xFF, 0xC3})
	sos := bytes.Index(good, []byte{0xFF, 0xDA})
	patch := func(off int, b byte) []byte {
		c := bytes.Clone(good)
		c[off] = b
		return c
	}
	huge := bytes.Clone(good)
	copy(huge[sof+5:], []byte{0xFF, 0xFF, 0xFF, 0xFF})
	cases := []struct {
		name string
		data []byte
		is   error
	}{
		{"empty", nil, nil},
		{"no SOI", good[2:], nil},
		{"only SOI", good[:2], ErrTruncated},
		{"cut in entropy data", good[:len(good)-4], ErrTruncated},
		{"no EOI", good[:len(good)-2], ErrTruncated},
		{"baseline SOF0", patch(sof+1, 0xC0), nil},
		{"precision 1", patch(sof+4, 1), nil},
		{"precision 17", patch(sof+4, 17), nil},
		{"predictor 0", patch(sos+7, 0), nil},
		{"predictor 8", patch(sos+7, 8), nil},
		{"point transform 8 at P=8", patch(sos+9, 8), nil},
		{"undefined table", patch(sos+6, 0x10), nil},
		{"unknown component", patch(sos+5, 9), nil},
		{"huge frame", huge, ErrTooLarge},
		{"garbage", []byte("not a jpeg at all"), nil},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			img, err := DecodeJPEGLossless(c.data)
			if err == nil {
				t.Fatalf("no error, got %+v", img)
			}
			if c.is != nil && !errors.Is(err, c.is) {
				t.Fatalf("error %v, want %v", err, c.is)
			}
		})
	}
}

// Source: ITU-T T.81 B.2.2 ranges; the encoder rejects what it cannot code.
func TestEncodeJPEGLosslessValidation(t *testing.T) {
	cases := []struct {
		name    string
		s       []uint16
		w, h, p int
	}{
		{"value above precision", []uint16{256}, 1, 1, 8},
		{"length mismatch", []uint16{1, 2}, 3, 1, 8},
		{"precision 1", []uint16{1}, 1, 1, 1},
		{"width 65536", make([]uint16, 65536), 65536, 1, 8},
		{"zero height", nil, 1, 0, 8},
	}
	for _, c := range cases {
		if _, err := EncodeJPEGLossless(c.s, c.w, c.h, c.p); err == nil {
			t.Errorf("%s: accepted", c.name)
		}
	}
}
