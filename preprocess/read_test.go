package preprocess

import (
	"bytes"
	"context"
	"encoding/binary"
	"errors"
	"os"
	"path/filepath"
	"strings"
	"testing"

	"github.com/midsag/midsag"
	"github.com/midsag/midsag/internal/testtool"
	"github.com/midsag/midsag/part10"
)

func readFile(t *testing.T, p *Preprocessor, path string) (*midsag.Instance, error) {
	t.Helper()
	f, err := os.Open(path)
	if err != nil {
		t.Fatal(err)
	}
	defer f.Close()
	return p.Read(filepath.Base(path), f)
}

func mustDecode(t *testing.T, path string) (*midsag.Instance, *midsag.Image) {
	t.Helper()
	inst, err := readFile(t, New(Options{}), path)
	if err != nil {
		t.Fatalf("read %s: %v", path, err)
	}
	img, err := Decode(inst)
	if err != nil {
		t.Fatalf("decode %s: %v", path, err)
	}
	return inst, img
}

func samePixels(t *testing.T, name string, want, got *midsag.Image) {
	t.Helper()
	if want.Rows != got.Rows || want.Columns != got.Columns {
		t.Fatalf("%s: size %dx%d, want %dx%d", name, got.Rows, got.Columns, want.Rows, want.Columns)
	}
	for i := range want.Pix {
		if want.Pix[i] != got.Pix[i] {
			t.Fatalf("%s: pixel %d = %v, want %v", name, i, got.Pix[i], want.Pix[i])
		}
	}
}

// TestPydicomMRSmallVariants checks that the transfer-syntax variants of
// the same MR image in pydicom's test files (Debian python3-pydicom) decode
// to identical pixels, plus a deflated copy made with DCMTK's dcmconv and
// JPEG lossless copies made with DCMTK's dcmcjpeg.
func TestPydicomMRSmallVariants(t *testing.T) {
	ref := testtool.PydicomFile(t, "MR_small.dcm")
	_, want := mustDecode(t, ref)
	variants := map[string]string{
		"implicit":   testtool.PydicomFile(t, "MR_small_implicit.dcm"),
		"big-endian": testtool.PydicomFile(t, "MR_small_bigendian.dcm"),
		"rle":        testtool.PydicomFile(t, "MR_small_RLE.dcm"),
	}
	dir := t.TempDir()
	deflated := filepath.Join(dir, "deflated.dcm")
	testtool.Run(t, "dcmconv", "+td", ref, deflated)
	variants["deflated (dcmconv +td)"] = deflated
	for _, sv := range []string{"1", "4", "7"} {
		p := filepath.Join(dir, "jpegll"+sv+".dcm")
		testtool.Run(t, "dcmcjpeg", "+el", "+sv", sv, ref, p)
		variants["jpeg lossless (dcmcjpeg +el +sv "+sv+")"] = p
	}
	sv1 := filepath.Join(dir, "jpegll-e1.dcm")
	testtool.Run(t, "dcmcjpeg", "+e1", ref, sv1)
	variants["jpeg lossless sv1 (dcmcjpeg +e1)"] = sv1
	wantTS := map[string]string{"deflated (dcmconv +td)": midsag.DeflatedExplicitVRLittleEndian, "big-endian": midsag.ExplicitVRBigEndian,
		"rle": midsag.RLELossless, "implicit": midsag.ImplicitVRLittleEndian, "jpeg lossless sv1 (dcmcjpeg +e1)": midsag.JPEGLosslessSV1,
		"jpeg lossless (dcmcjpeg +el +sv 4)": midsag.JPEGLossless}
	for name, path := range variants {
		inst, got := mustDecode(t, path)
		if ts, ok := wantTS[name]; ok && inst.TransferSyntaxUID != ts {
			t.Errorf("%s: transfer syntax %s, want %s", name, inst.TransferSyntaxUID, ts)
		}
		samePixels(t, name, want, got)
	}
}

// TestPydicomRefusals checks the reason codes for pydicom's broken test
// files: MR_truncated.dcm is cut inside its pixel data and no_meta.dcm has
// no preamble or file meta information (pydicom test_files README).
func TestPydicomRefusals(t *testing.T) {
	p := New(Options{})
	_, err := readFile(t, p, testtool.PydicomFile(t, "MR_truncated.dcm"))
	if inst, err2 := readFile(t, p, testtool.PydicomFile(t, "MR_truncated.dcm")); err2 == nil {
		_, err = Decode(inst)
	}
	if r, _ := midsag.ReasonOf(err); r != midsag.ReasonTruncated {
		t.Errorf("MR_truncated.dcm: %v, want reason truncated", err)
	}
	_, err = readFile(t, p, testtool.PydicomFile(t, "no_meta.dcm"))
	if r, _ := midsag.ReasonOf(err); r != midsag.ReasonNotDICOM {
		t.Errorf("no_meta.dcm: %v, want not_dicom", err)
	}
	// A bare data set without preamble or meta information, written by
	// DCMTK's dcmconv -F, is read only in lenient mode.
	_, want := mustDecode(t, testtool.PydicomFile(t, "MR_small.dcm"))
	for _, ts := range []string{"+ti", "+te"} {
		bare := filepath.Join(t.TempDir(), "bare.dcm")
		testtool.Run(t, "dcmconv", "-F", ts, testtool.PydicomFile(t, "MR_small.dcm"), bare)
		if _, err := readFile(t, p, bare); err == nil {
			t.Errorf("bare data set (%s) read without Lenient", ts)
		}
		inst, err := readFile(t, New(Options{Lenient: true}), bare)
		if err != nil {
			t.Fatalf("bare data set (%s) with Lenient: %v", ts, err)
		}
		img, err := Decode(inst)
		if err != nil {
			t.Fatal(err)
		}
		samePixels(t, "bare "+ts, want, img)
	}
}

// TestJPEGBaselineAgainstDCMTK decodes an 8-bit JPEG baseline file from
// pydicom's test files and compares with DCMTK's dcmdjpeg. Baseline JPEG
// decoders may round the inverse DCT differently, so ITU-T T.83 (JPEG
// compliance testing) allows +-1; we allow a mean absolute difference of 1.
func TestJPEGBaselineAgainstDCMTK(t *testing.T) {
	src := testtool.PydicomFile(t, "SC_rgb_jpeg_dcmtk.dcm")
	out := filepath.Join(t.TempDir(), "plain.dcm")
	testtool.Run(t, "dcmdjpeg", src, out)
	_, want := mustDecode(t, out)
	_, got := mustDecode(t, src)
	if want.Rows != got.Rows || want.Columns != got.Columns {
		t.Fatalf("size mismatch")
	}
	var sum float64
	for i := range want.Pix {
		d := float64(want.Pix[i] - got.Pix[i])
		if d < 0 {
			d = -d
		}
		sum += d
	}
	if mean := sum / float64(len(want.Pix)); mean > 1 {
		t.Errorf("mean absolute difference from dcmdjpeg %.3f > 1", mean)
	}
}

// TestRejectsNonDICOM covers inputs that are not DICOM at all.
func TestRejectsNonDICOM(t *testing.T) {
	p := New(Options{})
	cases := map[string][]byte{
		"empty": nil,
		"gzip":  {0x1f, 0x8b, 8, 0, 0, 0, 0, 0, 0, 3},
		"png":   append([]byte("\x89PNG\r\n\x1a\n"), make([]byte, 200)...),
		"text":  bytes.Repeat([]byte("hello "), 50),
	}
	for name, data := range cases {
		_, err := p.Read(name, bytes.NewReader(data))
		if r, _ := midsag.ReasonOf(err); r != midsag.ReasonNotDICOM {
			t.Errorf("%s: %v, want not_dicom", name, err)
		}
	}
}

// part10File builds a minimal Explicit VR Little Endian Part 10 stream
// (PS3.10 7.1) from raw element bytes.
func part10File(body []byte) []byte {
	var b bytes.Buffer
	b.Write(make([]byte, 128))
	b.WriteString("DICM")
	ts := midsag.ExplicitVRLittleEndian + "\x00"
	b.Write(elem(0x0002, 0x0010, "UI", []byte(ts)))
	b.Write(body)
	return b.Bytes()
}

func elem(group, el uint16, vr string, val []byte) []byte {
	var b bytes.Buffer
	binary.Write(&b, binary.LittleEndian, group)
	binary.Write(&b, binary.LittleEndian, el)
	b.WriteString(vr)
	if part10.LongVR(vr) {
		b.Write([]byte{0, 0})
		binary.Write(&b, binary.LittleEndian, uint32(len(val)))
	} else {
		binary.Write(&b, binary.LittleEndian, uint16(len(val)))
	}
	b.Write(val)
	return b.Bytes()
}

func us(v uint16) []byte { return binary.LittleEndian.AppendUint16(nil, v) }

// TestLimits checks that oversized headers and element lengths are refused
// before any allocation of their size.
func TestLimits(t *testing.T) {
	p := New(Options{})
	huge := part10File(bytes.Join([][]byte{
		elem(0x0008, 0x0018, "UI", []byte("1.2.3.4\x00")),
		elem(0x0028, 0x0010, "US", us(60000)),
		elem(0x0028, 0x0011, "US", us(60000)),
	}, nil))
	_, err := p.Read("huge", bytes.NewReader(huge))
	if r, _ := midsag.ReasonOf(err); r != midsag.ReasonTooLarge {
		t.Errorf("60000x60000 header: %v, want too_large", err)
	}
	// An OB element claiming 4 GB in a 200-byte file.
	lying := part10File(append(elem(0x0008, 0x0018, "UI", []byte("1.2.3.4\x00")),
		[]byte{0x09, 0x00, 0x10, 0x10, 'O', 'B', 0, 0, 0xf0, 0xff, 0xff, 0xff}...))
	_, err = p.Read("lying", bytes.NewReader(lying))
	if r, _ := midsag.ReasonOf(err); r != midsag.ReasonTooLarge && r != midsag.ReasonTruncated {
		t.Errorf("4 GB element: %v, want too_large or truncated", err)
	}
	small := New(Options{Limits: Limits{MaxFileBytes: 100}})
	_, err = small.Read("big", bytes.NewReader(make([]byte, 1000)))
	if r, _ := midsag.ReasonOf(err); r != midsag.ReasonTooLarge {
		t.Errorf("file over limit: %v, want too_large", err)
	}
}

// TestUnsupportedSyntaxNamesUID checks the refusal for a syntax midsag
// never decodes: pydicom's JPEG 2000 MR file relabelled in its file meta
// as JPEG 2000 Part 2 Multi-component Lossless (1.2.840.10008.1.2.4.92,
// PS3.6 Annex A; same UID length, same encapsulated data set).
func TestUnsupportedSyntaxNamesUID(t *testing.T) {
	data, err := os.ReadFile(testtool.PydicomFile(t, "MR_small_jp2klossless.dcm"))
	if err != nil {
		t.Fatal(err)
	}
	const part2 = "1.2.840.10008.1.2.4.92"
	data = bytes.Replace(data, []byte(midsag.JPEG2000Lossless), []byte(part2), 1)
	inst, err := New(Options{}).Read("part2.dcm", bytes.NewReader(data))
	if err != nil {
		t.Fatal(err)
	}
	_, err = Decode(inst)
	var me *midsag.Error
	if !errors.As(err, &me) || me.Reason != midsag.ReasonUnsupportedSyntax || !strings.Contains(me.Msg, part2) {
		t.Errorf("JPEG 2000 Part 2: %v, want unsupported_transfer_syntax naming %s", err, part2)
	}
}

func TestPrepareRefusesMultipleStudies(t *testing.T) {
	a := &midsag.Instance{SOPInstanceUID: "1", StudyInstanceUID: "s1"}
	b := &midsag.Instance{SOPInstanceUID: "2", StudyInstanceUID: "s2"}
	_, err := New(Options{}).Prepare(context.Background(), []*midsag.Instance{a, b}, midsag.InputSpec{Slices: 3})
	if r, _ := midsag.ReasonOf(err); r != midsag.ReasonMultipleStudies {
		t.Errorf("got %v, want multiple_studies", err)
	}
}
