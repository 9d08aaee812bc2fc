package codec

import (
	"bytes"
	"compress/flate"
	"errors"
	"testing"
)

// codestream is a real frame of each cgo codec with its DICOM header
// values, from pydicom's test files (Debian python3-pydicom): MR_small
// compressed with JPEG 2000 lossless and JPEG-LS lossless.
type codestream struct {
	name   string
	frame  []byte
	want   Expect
	decode func([]byte, Expect) (*Frame, error)
	built  bool
}

func codestreams(t *testing.T) []codestream {
	var out []codestream
	for _, c := range []struct {
		file   string
		decode func([]byte, Expect) (*Frame, error)
		built  bool
	}{
		{"MR_small_jp2klossless.dcm", DecodeJPEG2000, JPEG2000Built},
		{"MR_small_jpeg_ls_lossless.dcm", DecodeJPEGLS, JPEGLSBuilt},
	} {
		im := readImage(t, pydicomFile(t, c.file))
		out = append(out, codestream{c.file, im.encapsulated,
			Expect{Rows: im.rows, Cols: im.cols, Components: im.spp, BitsAllocated: im.bitsAlloc}, c.decode, c.built})
	}
	return out
}

// TestCorruptCodestreams cuts and damages real JPEG 2000 and JPEG-LS
// frames and gives header values that do not match them: every case must
// be an error (cut streams, mismatches) or a frame of exactly the
// announced size (damaged bytes a decoder may not detect), never a panic.
// OpenJPEG runs in strict mode, so a cut stream is an error, not a partly
// decoded image.
func TestCorruptCodestreams(t *testing.T) {
	for _, cs := range codestreams(t) {
		if !cs.built {
			_, err := cs.decode(cs.frame, cs.want)
			var nb *NotBuiltError
			if !errors.As(err, &nb) {
				t.Errorf("%s: %v, want NotBuiltError in a build without the codec", cs.name, err)
			}
			continue
		}
		good, err := cs.decode(cs.frame, cs.want)
		if err != nil {
			t.Fatalf("%s: %v", cs.name, err)
		}
		if len(good.Samples) != cs.want.Rows*cs.want.Cols*cs.want.Components {
			t.Fatalf("%s: %d samples", cs.name, len(good.Samples))
		}
		n := len(cs.frame)
		for _, cut := range []int{0, 1, 2, 10, 40, n / 4, n / 2, n - 8} {
			if _, err := cs.decode(cs.frame[:cut], cs.want); err == nil {
				t.Errorf("%s cut to %d of %d bytes: no error", cs.name, cut, n)
			}
		}
		mismatch := map[string]Expect{
			"rows+1":         {cs.want.Rows + 1, cs.want.Cols, cs.want.Components, cs.want.BitsAllocated},
			"cols-1":         {cs.want.Rows, cs.want.Cols - 1, cs.want.Components, cs.want.BitsAllocated},
			"3 components":   {cs.want.Rows, cs.want.Cols, 3, cs.want.BitsAllocated},
			"8 bits":         {cs.want.Rows, cs.want.Cols, cs.want.Components, 8},
			"no rows":        {0, cs.want.Cols, cs.want.Components, cs.want.BitsAllocated},
			"beyond the cap": {1 << 15, 1 << 15, 1, 16},
		}
		for what, e := range mismatch {
			if _, err := cs.decode(cs.frame, e); err == nil {
				t.Errorf("%s with header %s: no error", cs.name, what)
			}
		}
		for _, at := range []int{2, 4, 8, 20, 60, n / 3, n / 2, n - 3} {
			bad := bytes.Clone(cs.frame)
			bad[at] ^= 0xA5
			f, err := cs.decode(bad, cs.want)
			if err == nil && len(f.Samples) != len(good.Samples) {
				t.Errorf("%s with byte %d damaged: %d samples, want %d", cs.name, at, len(f.Samples), len(good.Samples))
			}
		}
	}
}

// TestInflateFrame checks Deflated Image Frame Compression frames (PS3.5
// A.4.13): exact size, the odd-length NUL pad, short and long streams and
// garbage.
func TestInflateFrame(t *testing.T) {
	native := bytes.Repeat([]byte{1, 2, 3, 250}, 1000)
	var b bytes.Buffer
	w, _ := flate.NewWriter(&b, flate.BestCompression)
	w.Write(native)
	w.Close()
	frame := b.Bytes()
	if len(frame)%2 == 1 {
		frame = append(frame, 0)
	}
	got, err := InflateFrame(frame, len(native))
	if err != nil || !bytes.Equal(got, native) {
		t.Fatalf("inflate: %v", err)
	}
	if _, err := InflateFrame(frame, len(native)+1); !errors.Is(err, ErrTruncated) {
		t.Errorf("frame shorter than announced: %v, want ErrTruncated", err)
	}
	if _, err := InflateFrame(frame, len(native)-1); err == nil {
		t.Error("frame longer than announced: no error")
	}
	if _, err := InflateFrame(frame[:len(frame)/2], len(native)); err == nil {
		t.Error("cut stream: no error")
	}
	if _, err := InflateFrame([]byte{0xff, 0xff, 0xff, 0xff}, 16); err == nil {
		t.Error("garbage: no error")
	}
	if _, err := InflateFrame(frame, 0); !errors.Is(err, ErrTooLarge) {
		t.Errorf("size 0: %v", err)
	}
}
