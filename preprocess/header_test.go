package preprocess

import (
	"bytes"
	"os"
	"reflect"
	"testing"

	"github.com/midsag/midsag"
	"github.com/midsag/midsag/internal/testtool"
	"github.com/midsag/midsag/phantom"
)

// countingReaderAt counts the bytes read.
type countingReaderAt struct {
	r     *bytes.Reader
	total int64
}

func (c *countingReaderAt) Read(p []byte) (int, error) { panic("ReadHeader must use ReadAt") }

func (c *countingReaderAt) ReadAt(p []byte, off int64) (int, error) {
	n, err := c.r.ReadAt(p, off)
	c.total += int64(n)
	return n, err
}

// pixelValueStart returns the offset of the first Pixel Data value byte,
// found by searching for the tag as the phantom writer lays it out.
func pixelValueStart(t *testing.T, data []byte, bigEndian, implicit bool) int64 {
	t.Helper()
	tag := []byte{0xE0, 0x7F, 0x10, 0x00}
	if bigEndian {
		tag = []byte{0x7F, 0xE0, 0x00, 0x10}
	}
	i := bytes.LastIndex(data, tag)
	if i < 0 {
		t.Fatal("no Pixel Data tag")
	}
	if implicit {
		return int64(i + 8)
	}
	return int64(i + 12)
}

// TestReadHeaderMatchesRead checks ReadHeader against Read (the full
// parser) on phantom files in every transfer syntax the phantom writes:
// the same attributes, no pixel data, and no byte of the pixel value read.
func TestReadHeaderMatchesRead(t *testing.T) {
	pre := New(Options{})
	for i, ts := range phantom.SupportedSyntaxes() {
		files, _, err := phantom.GenerateStudy(phantom.Options{Seed: 3, Syntaxes: []string{ts}, NoDecoys: true}, i)
		if err != nil {
			t.Fatal(err)
		}
		data := files[0].Data
		want, err := pre.Read("f", bytes.NewReader(data))
		if err != nil {
			t.Fatalf("%s: Read: %v", ts, err)
		}
		ra := &countingReaderAt{r: bytes.NewReader(data)}
		got, err := pre.ReadHeader("f", ra, int64(len(data)))
		if err != nil {
			t.Fatalf("%s: ReadHeader: %v", ts, err)
		}
		if got.PixelData != nil || got.Fragments != nil {
			t.Errorf("%s: header read kept pixel data", ts)
		}
		want.PixelData, want.Fragments = nil, nil
		if !reflect.DeepEqual(got, want) {
			t.Errorf("%s: ReadHeader = %+v\nRead = %+v", ts, got, want)
		}
		if ts == midsag.DeflatedExplicitVRLittleEndian {
			continue // inflating needs the whole stream
		}
		limit := pixelValueStart(t, data, ts == midsag.ExplicitVRBigEndian, ts == midsag.ImplicitVRLittleEndian)
		encapsulated := ts != midsag.ExplicitVRLittleEndian && ts != midsag.ExplicitVRBigEndian && ts != midsag.ImplicitVRLittleEndian
		// Reads stop within the doubling chunk that reached Pixel Data,
		// plus 8 bytes per fragment header when encapsulated.
		bound := 2 * max(limit, headerChunk)
		if encapsulated {
			bound += int64(len(data)) / 8
		}
		if ra.total > bound || ra.total >= int64(len(data)) {
			t.Errorf("%s: read %d of %d bytes; pixel value starts at %d", ts, ra.total, len(data), limit)
		}
	}
}

// TestReadHeaderTruncated cuts a phantom file inside its pixel data: the
// header still names the study, with the truncated refusal Read gives.
func TestReadHeaderTruncated(t *testing.T) {
	pre := New(Options{})
	for _, ts := range []string{midsag.ExplicitVRLittleEndian, midsag.JPEGLosslessSV1} {
		files, truth, err := phantom.GenerateStudy(phantom.Options{Seed: 4, Syntaxes: []string{ts}, NoDecoys: true}, 0)
		if err != nil {
			t.Fatal(err)
		}
		data := files[0].Data[:len(files[0].Data)/2]
		_, rerr := pre.Read("f", bytes.NewReader(data))
		inst, err := pre.ReadHeader("f", bytes.NewReader(data), int64(len(data)))
		if r, _ := midsag.ReasonOf(err); r != midsag.ReasonTruncated {
			t.Fatalf("%s: ReadHeader error %v, want truncated", ts, err)
		}
		if r, _ := midsag.ReasonOf(rerr); r != midsag.ReasonTruncated {
			t.Fatalf("%s: Read error %v, want truncated like ReadHeader", ts, rerr)
		}
		if inst == nil || inst.StudyInstanceUID != truth.StudyInstanceUID {
			t.Fatalf("%s: instance %+v, want study %s", ts, inst, truth.StudyInstanceUID)
		}
	}
}

// TestReadHeaderRefusals checks refusals against Read's on pydicom's test
// files (Debian python3-pydicom) and on non-DICOM bytes, through a plain
// io.Reader as a zip entry gives.
func TestReadHeaderRefusals(t *testing.T) {
	pre := New(Options{Limits: Limits{MaxFileBytes: 1 << 20}})
	cases := map[string][]byte{
		"text":  []byte("not a DICOM file at all, just some notes\n"),
		"empty": {},
		"big":   make([]byte, 2<<20),
	}
	for _, name := range []string{"MR_small.dcm", "MR_small_jp2klossless.dcm", "MR_small_bigendian.dcm"} {
		b, err := os.ReadFile(testtool.PydicomFile(t, name))
		if err != nil {
			t.Fatal(err)
		}
		cases[name] = b
	}
	for name, data := range cases {
		want, werr := pre.Read(name, bytes.NewReader(data))
		got, gerr := pre.ReadHeader(name, bytes.NewBuffer(data), int64(len(data)))
		wr, _ := midsag.ReasonOf(werr)
		gr, _ := midsag.ReasonOf(gerr)
		if wr != gr || (werr == nil) != (gerr == nil) {
			t.Errorf("%s: ReadHeader error %v, Read error %v", name, gerr, werr)
			continue
		}
		if werr == nil && (got.SOPInstanceUID != want.SOPInstanceUID || got.TransferSyntaxUID != want.TransferSyntaxUID || got.StudyInstanceUID != want.StudyInstanceUID) {
			t.Errorf("%s: ReadHeader %+v, Read %+v", name, got, want)
		}
	}
	if _, err := pre.ReadHeader("text", bytes.NewReader(cases["text"]), 1<<30); !isReason(err, midsag.ReasonTooLarge) {
		t.Errorf("stated size above the limit: %v, want too_large", err)
	}
}
