package codec

import (
	"os/exec"
	"path/filepath"
	"testing"
)

// FuzzDecodeRLE checks that DecodeRLE never panics and, when it succeeds,
// returns exactly rows*cols*samples*bytes and survives a re-encode. Seeds
// are RLE frames from pydicom's test files (8/16 bits, 1 and 3 samples).
// Run with: go test -run '^$' -fuzz FuzzDecodeRLE -fuzztime 30s
func FuzzDecodeRLE(f *testing.F) {
	for _, name := range []string{"MR_small_RLE.dcm", "SC_rgb_rle.dcm", "SC_rgb_rle_16bit.dcm"} {
		im := readImage(f, pydicomFile(f, name))
		f.Add(im.encapsulated, uint16(im.rows), uint16(im.cols), uint8(im.spp), uint8(im.bitsAlloc))
	}
	f.Add(rleFrame([]byte{0xFE, 0xAA, 0x01, 0x05, 0x06}), uint16(1), uint16(5), uint8(1), uint8(8))
	f.Fuzz(func(t *testing.T, frame []byte, rows, cols uint16, spp, bits uint8) {
		out, err := DecodeRLE(frame, int(rows), int(cols), int(spp), int(bits))
		if err != nil {
			return
		}
		if want := int(rows) * int(cols) * int(spp) * int(bits) / 8; len(out) != want {
			t.Fatalf("decoded %d bytes, want %d", len(out), want)
		}
		enc, err := EncodeRLE(out, int(rows), int(cols), int(spp), int(bits))
		if err != nil {
			t.Fatalf("re-encode: %v", err)
		}
		back, err := DecodeRLE(enc, int(rows), int(cols), int(spp), int(bits))
		if err != nil || string(back) != string(out) {
			t.Fatalf("re-encoded frame does not round trip: %v", err)
		}
	})
}

// FuzzDecodeJPEGLossless checks that DecodeJPEGLossless never panics and
// that a decoded image has Width*Height*Components samples. Seeds are our
// encoding of pydicom's MR_small.dcm, the hand-built restart stream and,
// when DCMTK is installed, dcmcjpeg output for several selection values.
// Run with: go test -run '^$' -fuzz FuzzDecodeJPEGLossless -fuzztime 30s
func FuzzDecodeJPEGLossless(f *testing.F) {
	im := readImage(f, pydicomFile(f, "MR_small.dcm"))
	enc, err := EncodeJPEGLossless(samplesFromNative(im.interleaved(f), 16), im.cols, im.rows, 16)
	if err != nil {
		f.Fatal(err)
	}
	f.Add(enc)
	if _, err := exec.LookPath("dcmcjpeg"); err == nil {
		dir := f.TempDir()
		for i, args := range [][]string{{"+e1"}, {"+el", "+sv", "7"}, {"+el", "+sv", "4", "+pt", "1"}} {
			src := pydicomFile(f, "SC_rgb_small_odd.dcm")
			if i == 0 {
				src = pydicomFile(f, "MR_small.dcm")
			}
			out := filepath.Join(dir, "seed.dcm")
			run(f, "dcmcjpeg", append(args, src, out)...)
			f.Add(readImage(f, out).encapsulated)
		}
	}
	f.Fuzz(func(t *testing.T, data []byte) {
		img, err := DecodeJPEGLossless(data)
		if err != nil {
			return
		}
		if len(img.Samples) != img.Width*img.Height*img.Components {
			t.Fatalf("%d samples for %dx%dx%d", len(img.Samples), img.Width, img.Height, img.Components)
		}
	})
}

// FuzzDecodeJPEG2000 and FuzzDecodeJPEGLS check that the cgo decoders
// never crash and that a decoded frame has exactly the announced number
// of samples. Seeds are pydicom's MR_small frames. In a build without the
// codec every call returns NotBuiltError.
// Run with: go test -tags openjpeg -run '^$' -fuzz FuzzDecodeJPEG2000 -fuzztime 30s
func FuzzDecodeJPEG2000(f *testing.F) { fuzzCodec(f, "MR_small_jp2klossless.dcm", DecodeJPEG2000) }

// FuzzDecodeJPEGLS: see FuzzDecodeJPEG2000.
// Run with: go test -tags charls -run '^$' -fuzz FuzzDecodeJPEGLS -fuzztime 30s
func FuzzDecodeJPEGLS(f *testing.F) { fuzzCodec(f, "MR_small_jpeg_ls_lossless.dcm", DecodeJPEGLS) }

func fuzzCodec(f *testing.F, seed string, decode func([]byte, Expect) (*Frame, error)) {
	im := readImage(f, pydicomFile(f, seed))
	f.Add(im.encapsulated, uint8(im.rows), uint8(im.cols), uint8(im.spp), uint8(im.bitsAlloc))
	f.Fuzz(func(t *testing.T, frame []byte, rows, cols, spp, bits uint8) {
		fr, err := decode(frame, Expect{Rows: int(rows), Cols: int(cols), Components: int(spp), BitsAllocated: int(bits)})
		if err != nil {
			return
		}
		if len(fr.Samples) != int(rows)*int(cols)*int(spp) {
			t.Fatalf("decoded %d samples, want %d", len(fr.Samples), int(rows)*int(cols)*int(spp))
		}
	})
}

// FuzzInflateFrame checks that InflateFrame returns exactly size bytes or
// an error.
// Run with: go test -run '^$' -fuzz FuzzInflateFrame -fuzztime 30s
func FuzzInflateFrame(f *testing.F) {
	f.Add([]byte{0x63, 0x60, 0x00, 0x00}, uint16(2))
	f.Fuzz(func(t *testing.T, frame []byte, size uint16) {
		out, err := InflateFrame(frame, int(size))
		if err == nil && len(out) != int(size) {
			t.Fatalf("%d bytes, want %d", len(out), size)
		}
	})
}
