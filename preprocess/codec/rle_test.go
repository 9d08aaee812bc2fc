package codec

import (
	"bytes"
	"encoding/binary"
	"errors"
	"path/filepath"
	"testing"
)

// Source: pydicom test files. MR_small_RLE.dcm is the RLE Lossless encoding
// of MR_small.dcm; decoding it must give MR_small.dcm's native pixels.
func TestDecodeRLEPydicomMRSmall(t *testing.T) {
	native := readImage(t, pydicomFile(t, "MR_small.dcm"))
	rle := readImage(t, pydicomFile(t, "MR_small_RLE.dcm"))
	if rle.transferSyntaxUID != tsRLE {
		t.Fatalf("MR_small_RLE.dcm transfer syntax %s", rle.transferSyntaxUID)
	}
	got, err := DecodeRLE(rle.encapsulated, rle.rows, rle.cols, rle.spp, rle.bitsAlloc)
	if err != nil {
		t.Fatal(err)
	}
	if want := native.interleaved(t); !bytes.Equal(got, want) {
		t.Fatalf("pixels differ from MR_small.dcm: %s", firstDiff(got, want))
	}
}

// Source: DCMTK dcmdrle is the reference decoder. Files already RLE come from
// pydicom's test files (8, 16 and 32 bits, 1 and 3 samples); native files are
// first compressed with DCMTK dcmcrle.
func TestDecodeRLEMatchesDCMTK(t *testing.T) {
	cases := []struct {
		file       string
		compressed bool
	}{
		{"MR_small.dcm", false},
		{"CT_small.dcm", false},
		{"SC_rgb_small_odd.dcm", false},
		{"SC_rgb_rle.dcm", true},
		{"SC_rgb_rle_16bit.dcm", true},
		{"SC_rgb_rle_32bit.dcm", true},
		{"rtdose_rle_1frame.dcm", true},
	}
	for _, c := range cases {
		t.Run(c.file, func(t *testing.T) {
			dir := t.TempDir()
			src := pydicomFile(t, c.file)
			rlePath := src
			if !c.compressed {
				rlePath = filepath.Join(dir, "rle.dcm")
				run(t, "dcmcrle", src, rlePath)
			}
			refPath := filepath.Join(dir, "ref.dcm")
			run(t, "dcmdrle", rlePath, refPath)
			rle := readImage(t, rlePath)
			if rle.encapsulatedFrames != 1 {
				t.Fatalf("%d frames, want 1", rle.encapsulatedFrames)
			}
			got, err := DecodeRLE(rle.encapsulated, rle.rows, rle.cols, rle.spp, rle.bitsAlloc)
			if err != nil {
				t.Fatal(err)
			}
			ref := readImage(t, refPath)
			if want := ref.interleaved(t); !bytes.Equal(got, want) {
				t.Fatalf("differs from dcmdrle: %s", firstDiff(got, want))
			}
			if !c.compressed {
				if want := readImage(t, src).interleaved(t); !bytes.Equal(got, want) {
					t.Fatalf("differs from the original native pixels: %s", firstDiff(got, want))
				}
			}
		})
	}
}

// Source: DCMTK dcmdrle decodes our EncodeRLE output, wrapped in a DICOM
// file, back to the original pixels of pydicom's test files.
func TestEncodeRLEDecodedByDCMTK(t *testing.T) {
	for _, file := range []string{"MR_small.dcm", "CT_small.dcm", "SC_rgb_small_odd.dcm", "rtdose_1frame.dcm"} {
		t.Run(file, func(t *testing.T) {
			requireTool(t, "dcmdrle")
			im := readImage(t, pydicomFile(t, file))
			native := im.interleaved(t)
			enc, err := EncodeRLE(native, im.rows, im.cols, im.spp, im.bitsAlloc)
			if err != nil {
				t.Fatal(err)
			}
			dir := t.TempDir()
			p := writeVariant(t, im, dir, "ours.dcm", tsRLE, enc, nil)
			out := filepath.Join(dir, "dec.dcm")
			run(t, "dcmdrle", p, out)
			if got := readImage(t, out).interleaved(t); !bytes.Equal(got, native) {
				t.Fatalf("dcmdrle output differs: %s", firstDiff(got, native))
			}
			back, err := DecodeRLE(enc, im.rows, im.cols, im.spp, im.bitsAlloc)
			if err != nil || !bytes.Equal(back, native) {
				t.Fatalf("own round trip: err %v, %s", err, firstDiff(back, native))
			}
		})
	}
}

// rleFrame assembles an RLE frame from raw segments with the header layout
// of PS3.5 G.5.
func rleFrame(segs ...[]byte) []byte {
	out := make([]byte, rleHeaderSize)
	binary.LittleEndian.PutUint32(out, uint32(len(segs)))
	for i, s := range segs {
		binary.LittleEndian.PutUint32(out[4+4*i:], uint32(len(out)))
		out = append(out, s...)
	}
	return out
}

// Source: the PackBits example of Apple Technical Note TN1023 (from
// memory), the scheme PS3.5 G.3 adopts: FE AA 02 80 00 2A FD AA 03 80 00 2A
// 22 F7 AA unpacks to 24 bytes.
func TestDecodeRLEPackBitsExample(t *testing.T) {
	packed := []byte{0xFE, 0xAA, 0x02, 0x80, 0x00, 0x2A, 0xFD, 0xAA, 0x03, 0x80, 0x00, 0x2A, 0x22, 0xF7, 0xAA}
	want := []byte{0xAA, 0xAA, 0xAA, 0x80, 0x00, 0x2A, 0xAA, 0xAA, 0xAA, 0xAA, 0x80, 0x00, 0x2A, 0x22,
		0xAA, 0xAA, 0xAA, 0xAA, 0xAA, 0xAA, 0xAA, 0xAA, 0xAA, 0xAA}
	// One pad byte makes the segment even (PS3.5 G.5).
	got, err := DecodeRLE(rleFrame(append(packed, 0)), 1, len(want), 1, 8)
	if err != nil {
		t.Fatal(err)
	}
	if !bytes.Equal(got, want) {
		t.Fatalf("got % X", got)
	}
}

// Source: PS3.5 G.2 (segment order, most significant byte first) and G.5
// (header layout); a 16-bit sample 0x1234 is split into segment 1 = 0x12 and
// segment 2 = 0x34, and -128 (0x80) is a no-op header (G.3.2).
func TestDecodeRLESegmentOrder(t *testing.T) {
	frame := rleFrame([]byte{0x80, 0x00, 0x12, 0x00}, []byte{0x00, 0x34})
	got, err := DecodeRLE(frame, 1, 1, 1, 16)
	if err != nil {
		t.Fatal(err)
	}
	if !bytes.Equal(got, []byte{0x34, 0x12}) {
		t.Fatalf("got % X, want 34 12", got)
	}
}

// Source: PS3.5 G.3.1 requires each row to be packed on its own; our
// encoder output, decoded row by row, must not contain a run that crosses
// a row boundary (a row of 3 equal bytes followed by another is coded as two
// runs, so the segment is FE 07 FE 07).
func TestEncodeRLERowsSeparate(t *testing.T) {
	enc, err := EncodeRLE([]byte{7, 7, 7, 7, 7, 7}, 2, 3, 1, 8)
	if err != nil {
		t.Fatal(err)
	}
	if seg := enc[rleHeaderSize:]; !bytes.Equal(seg, []byte{0xFE, 0x07, 0xFE, 0x07}) {
		t.Fatalf("segment % X, want FE 07 FE 07", seg)
	}
}

// Source: PS3.5 G.5 header rules and G.3.2 run syntax; each malformed frame
// must give an error, never a panic.
func TestDecodeRLEBadInput(t *testing.T) {
	good := rleFrame([]byte{0x01, 0x05, 0x06, 0x00})
	badOffset := rleFrame([]byte{0xFF, 0x07}, []byte{0xFF, 0x07}, []byte{0xFF, 0x07})
	binary.LittleEndian.PutUint32(badOffset[8:], 90)
	farOffset := rleFrame([]byte{0xFF, 0x07})
	binary.LittleEndian.PutUint32(farOffset[4:], 1<<31)
	firstOffset := rleFrame([]byte{0xFF, 0x07})
	binary.LittleEndian.PutUint32(firstOffset[4:], 65)
	cases := []struct {
		name                 string
		frame                []byte
		rows, cols, spp, bit int
		is                   error
	}{
		{"short header", good[:40], 1, 2, 1, 8, ErrTruncated},
		{"two segments for 8-bit grey", rleFrame([]byte{0xFF, 1}, []byte{0xFF, 1}), 1, 2, 1, 8, nil},
		{"no segments", rleFrame(), 1, 2, 1, 8, nil},
		{"one segment for 16-bit", good, 1, 2, 1, 16, nil},
		{"first offset not 64", firstOffset, 1, 2, 1, 8, nil},
		{"offset beyond frame", farOffset, 1, 2, 1, 8, ErrTruncated},
		{"decreasing offsets", badOffset, 1, 2, 3, 8, nil},
		{"literal run cut", rleFrame([]byte{0x05, 0x01}), 1, 6, 1, 8, ErrTruncated},
		{"replicate run cut", rleFrame([]byte{0xFE}), 1, 3, 1, 8, ErrTruncated},
		{"too few bytes", good, 1, 3, 1, 8, ErrTruncated},
		{"zero rows", good, 0, 2, 1, 8, nil},
		{"12 bits allocated", good, 1, 2, 1, 12, nil},
		{"too many segments", good, 1, 2, 8, 16, nil},
		{"huge image", good, 1 << 15, 1 << 15, 1, 8, ErrTooLarge},
		{"tiny frame for big image", good, 1000, 1000, 1, 8, ErrTruncated},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			got, err := DecodeRLE(c.frame, c.rows, c.cols, c.spp, c.bit)
			if err == nil {
				t.Fatalf("no error, got %d bytes", len(got))
			}
			if c.is != nil && !errors.Is(err, c.is) {
				t.Fatalf("error %v, want %v", err, c.is)
			}
		})
	}
	if got, err := DecodeRLE(good, 1, 2, 1, 8); err != nil || !bytes.Equal(got, []byte{5, 6}) {
		t.Fatalf("control frame: %v % X", err, got)
	}
}

// Source: PS3.5 G.5 (segment lengths must be even); EncodeRLE must reject
// native data whose length does not match the image attributes.
func TestEncodeRLEValidation(t *testing.T) {
	enc, err := EncodeRLE([]byte{1, 2, 3}, 1, 3, 1, 8)
	if err != nil {
		t.Fatal(err)
	}
	if (len(enc)-rleHeaderSize)%2 != 0 {
		t.Fatalf("segment of odd length %d", len(enc)-rleHeaderSize)
	}
	if _, err := EncodeRLE([]byte{1, 2, 3}, 1, 2, 1, 8); err == nil {
		t.Fatal("length mismatch accepted")
	}
	if _, err := EncodeRLE([]byte{1, 2}, 1, 1, 1, 12); err == nil {
		t.Fatal("12 bits allocated accepted")
	}
}
