package codec

import (
	"bytes"
	"os"
	"os/exec"
	"path/filepath"
	"strconv"
	"testing"

	"github.com/suyashkumar/dicom"
	"github.com/suyashkumar/dicom/pkg/frame"
	"github.com/suyashkumar/dicom/pkg/tag"
)

// pydicomFiles holds pydicom's test files as installed by Debian's
// python3-pydicom; they are the outside fixtures these tests read.
const pydicomFiles = "/usr/lib/python3/dist-packages/pydicom/data/test_files"

// Transfer syntax UIDs (PS3.6 Table A-1).
const (
	tsExplicitLE   = "1.2.840.10008.1.2.1"
	tsRLE          = "1.2.840.10008.1.2.5"
	tsJPEGLossless = "1.2.840.10008.1.2.4.70"
)

// pydicomFile returns the path of one of pydicom's test files, skipping the
// test when the package is not installed (or failing under
// MIDSAG_REQUIRE_TOOLS=1).
func pydicomFile(tb testing.TB, name string) string {
	tb.Helper()
	p := filepath.Join(pydicomFiles, name)
	if _, err := os.Stat(p); err != nil {
		missing(tb, "pydicom test file "+name)
	}
	return p
}

// missing skips, or fails when MIDSAG_REQUIRE_TOOLS=1, because an outside
// reference is not installed.
func missing(tb testing.TB, what string) {
	tb.Helper()
	if os.Getenv("MIDSAG_REQUIRE_TOOLS") == "1" {
		tb.Fatalf("%s is required (MIDSAG_REQUIRE_TOOLS=1) but missing", what)
	}
	tb.Skipf("%s not installed", what)
}

// requireTool checks that a DCMTK program is on PATH.
func requireTool(tb testing.TB, name string) {
	tb.Helper()
	if _, err := exec.LookPath(name); err != nil {
		missing(tb, name)
	}
}

// run executes a reference tool and fails the test with its output on error.
func run(tb testing.TB, name string, args ...string) {
	tb.Helper()
	requireTool(tb, name)
	out, err := exec.Command(name, args...).CombinedOutput()
	if err != nil {
		tb.Fatalf("%s %v: %v\n%s", name, args, err, out)
	}
}

// image is the pixel data of a single-frame DICOM file with the attributes
// needed to interpret it.
type image struct {
	ds                 dicom.Dataset
	rows, cols, spp    int
	bitsAlloc, planar  int
	bitsStored         int
	native             []byte // set for native transfer syntaxes
	encapsulated       []byte // first frame, fragments joined
	transferSyntaxUID  string
	encapsulatedFrames int
}

// readImage parses a DICOM file without decoding its pixel data.
func readImage(tb testing.TB, path string) *image {
	tb.Helper()
	ds, err := dicom.ParseFile(path, nil, dicom.SkipProcessingPixelDataValue())
	if err != nil {
		tb.Fatalf("parse %s: %v", path, err)
	}
	im := &image{ds: ds}
	ints := func(t tag.Tag, def int) int {
		e, err := ds.FindElementByTag(t)
		if err != nil {
			return def
		}
		v := dicom.MustGetInts(e.Value)
		if len(v) == 0 {
			return def
		}
		return v[0]
	}
	im.rows = ints(tag.Rows, 0)
	im.cols = ints(tag.Columns, 0)
	im.spp = ints(tag.SamplesPerPixel, 1)
	im.bitsAlloc = ints(tag.BitsAllocated, 0)
	im.bitsStored = ints(tag.BitsStored, im.bitsAlloc)
	im.planar = ints(tag.PlanarConfiguration, 0)
	if e, err := ds.FindElementByTag(tag.TransferSyntaxUID); err == nil {
		im.transferSyntaxUID = dicom.MustGetStrings(e.Value)[0]
	}
	pe, err := ds.FindElementByTag(tag.PixelData)
	if err != nil {
		tb.Fatalf("%s: no pixel data: %v", path, err)
	}
	info := dicom.MustGetPixelDataInfo(pe.Value)
	if info.IsEncapsulated {
		im.encapsulatedFrames = len(info.Frames)
		for _, f := range info.Frames {
			im.encapsulated = append(im.encapsulated, f.EncapsulatedData.Data...)
		}
	} else {
		im.native = info.UnprocessedValueData
	}
	return im
}

// interleaved returns the native pixels with planar configuration 0 and
// without the even-length padding byte (PS3.5 8.1.1, C.7.6.3.1.3).
func (im *image) interleaved(tb testing.TB) []byte {
	tb.Helper()
	bps := im.bitsAlloc / 8
	n := im.rows * im.cols * im.spp * bps
	if len(im.native) < n {
		tb.Fatalf("native pixel data %d bytes, want %d", len(im.native), n)
	}
	src := im.native[:n]
	if im.planar != 1 || im.spp == 1 {
		return src
	}
	pixels := im.rows * im.cols
	out := make([]byte, n)
	for s := range im.spp {
		for p := range pixels {
			copy(out[(p*im.spp+s)*bps:(p*im.spp+s+1)*bps], src[(s*pixels+p)*bps:(s*pixels+p+1)*bps])
		}
	}
	return out
}

// writeVariant writes im's dataset to dir/name with new pixel data: native
// bytes when ts is explicit little endian, otherwise one encapsulated frame
// (PS3.5 A.4). Attributes in set (tag → value) replace those in the file;
// Planar Configuration becomes 0 because the pixels given are interleaved.
func writeVariant(tb testing.TB, im *image, dir, name, ts string, pixels []byte, set map[tag.Tag]int) string {
	tb.Helper()
	var info dicom.PixelDataInfo
	vl := uint32(len(pixels))
	if ts == tsExplicitLE {
		info = dicom.PixelDataInfo{IntentionallyUnprocessed: true, UnprocessedValueData: pixels}
	} else {
		vl = tag.VLUndefinedLength
		// PS3.5 A.4: fragments have even length; a trailing zero after EOI
		// is the usual padding (common practice).
		if len(pixels)%2 != 0 {
			pixels = append(bytes.Clone(pixels), 0)
		}
		info = dicom.PixelDataInfo{IsEncapsulated: true, Frames: []*frame.Frame{{
			Encapsulated: true, EncapsulatedData: frame.EncapsulatedFrame{Data: pixels},
		}}}
	}
	var elems []*dicom.Element
	for _, e := range im.ds.Elements {
		switch {
		case e.Tag == tag.PixelData:
			v, err := dicom.NewValue(info)
			if err != nil {
				tb.Fatal(err)
			}
			e = &dicom.Element{Tag: tag.PixelData, ValueRepresentation: e.ValueRepresentation,
				RawValueRepresentation: e.RawValueRepresentation, ValueLength: vl, Value: v}
			if ts != tsExplicitLE {
				e.RawValueRepresentation = "OB"
			}
		case e.Tag == tag.TransferSyntaxUID:
			e = mustElement(tb, tag.TransferSyntaxUID, []string{ts})
		case e.Tag == tag.FileMetaInformationGroupLength:
			continue
		case e.Tag == tag.PlanarConfiguration:
			e = mustElement(tb, e.Tag, []int{0})
		default:
			if v, ok := set[e.Tag]; ok {
				e = mustElement(tb, e.Tag, []int{v})
			}
		}
		elems = append(elems, e)
	}
	var buf bytes.Buffer
	if err := dicom.Write(&buf, dicom.Dataset{Elements: elems}, dicom.SkipVRVerification()); err != nil {
		tb.Fatalf("write %s: %v", name, err)
	}
	p := filepath.Join(dir, name)
	if err := os.WriteFile(p, buf.Bytes(), 0o644); err != nil {
		tb.Fatal(err)
	}
	return p
}

// mustElement builds a DICOM element or fails the test.
func mustElement(tb testing.TB, t tag.Tag, v any) *dicom.Element {
	tb.Helper()
	e, err := dicom.NewElement(t, v)
	if err != nil {
		tb.Fatal(err)
	}
	return e
}

// samplesLE packs samples as little-endian 16-bit native bytes.
func samplesLE(s []uint16) []byte {
	out := make([]byte, 2*len(s))
	for i, v := range s {
		out[2*i], out[2*i+1] = byte(v), byte(v>>8)
	}
	return out
}

// samplesFromNative unpacks native bytes of 8 or 16 bits into samples.
func samplesFromNative(b []byte, bitsAlloc int) []uint16 {
	if bitsAlloc == 8 {
		out := make([]uint16, len(b))
		for i, v := range b {
			out[i] = uint16(v)
		}
		return out
	}
	out := make([]uint16, len(b)/2)
	for i := range out {
		out[i] = uint16(b[2*i]) | uint16(b[2*i+1])<<8
	}
	return out
}

// firstDiff describes the first differing byte of two slices, for messages.
func firstDiff(a, b []byte) string {
	if len(a) != len(b) {
		return "lengths " + strconv.Itoa(len(a)) + " and " + strconv.Itoa(len(b))
	}
	for i := range a {
		if a[i] != b[i] {
			return "byte " + strconv.Itoa(i) + ": " + strconv.Itoa(int(a[i])) + " vs " + strconv.Itoa(int(b[i]))
		}
	}
	return "equal"
}
