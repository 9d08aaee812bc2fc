package part10

import (
	"bytes"
	"os"
	"path/filepath"
	"strings"
	"testing"

	"github.com/midsag/midsag"
)

// pydicomFiles is where Debian's python3-pydicom ships its test files.
const pydicomFiles = "/usr/lib/python3/dist-packages/pydicom/data/test_files"

// TestParsePydicomFiles reads the File Meta Information of real files
// from pydicom's test data (MR_small.dcm and its implicit and big-endian
// copies, CT_small.dcm): the values are those pydicom's documentation and
// `dcmdump` show for them (MR Image Storage or CT Image Storage, PS3.6
// Table A-1; the transfer syntax each file is named for).
func TestParsePydicomFiles(t *testing.T) {
	for name, want := range map[string]Meta{
		"MR_small.dcm":           {SOPClassUID: midsag.MRImageStorage, TransferSyntaxUID: midsag.ExplicitVRLittleEndian},
		"MR_small_implicit.dcm":  {SOPClassUID: midsag.MRImageStorage, TransferSyntaxUID: midsag.ImplicitVRLittleEndian},
		"MR_small_bigendian.dcm": {SOPClassUID: midsag.MRImageStorage, TransferSyntaxUID: midsag.ExplicitVRBigEndian},
		"CT_small.dcm":           {SOPClassUID: "1.2.840.10008.5.1.4.1.1.2", TransferSyntaxUID: midsag.ExplicitVRLittleEndian},
	} {
		b, err := os.ReadFile(filepath.Join(pydicomFiles, name))
		if err != nil {
			if os.Getenv("MIDSAG_REQUIRE_TOOLS") == "1" {
				t.Fatalf("pydicom test file: %v", err)
			}
			t.Skipf("pydicom test files not installed: %v", err)
		}
		m, ds, err := Parse(b)
		if err != nil {
			t.Fatalf("%s: %v", name, err)
		}
		if m.SOPClassUID != want.SOPClassUID || m.TransferSyntaxUID != want.TransferSyntaxUID || !strings.HasPrefix(m.SOPInstanceUID, "1.") {
			t.Errorf("%s: meta %+v, want class %s, syntax %s", name, m, want.SOPClassUID, want.TransferSyntaxUID)
		}
		if len(ds) == 0 || len(ds)%2 != 0 || !bytes.HasSuffix(b, ds) {
			t.Errorf("%s: dataset of %d bytes is not the file's tail", name, len(ds))
		}
	}
}

// TestWrapParseRoundTrip: what Wrap writes, Parse reads back, with the
// odd-length values padded as PS3.5 6.2 requires (UI with NUL, SH and AE
// with a space) and the group length (0002,0000) equal to the group's size.
func TestWrapParseRoundTrip(t *testing.T) {
	m := Meta{SOPClassUID: midsag.MRImageStorage, SOPInstanceUID: "1.2.3", TransferSyntaxUID: midsag.ExplicitVRLittleEndian,
		SourceAETitle: "NSIL_PACS"}
	ds := []byte{0x08, 0x00, 0x18, 0x00, 'U', 'I', 6, 0, '1', '.', '2', '.', '3', 0}
	b := Wrap(m, ds)
	if string(b[128:132]) != "DICM" || !bytes.Equal(b[:128], make([]byte, 128)) {
		t.Fatal("no preamble and DICM")
	}
	gl := int(b[140]) | int(b[141])<<8 | int(b[142])<<16 | int(b[143])<<24
	if 144+gl+len(ds) != len(b) {
		t.Errorf("group length %d, file %d bytes, dataset %d", gl, len(b), len(ds))
	}
	got, rest, err := Parse(b)
	if err != nil {
		t.Fatal(err)
	}
	want := m
	want.ImplementationClassUID, want.ImplementationVersionName = midsag.ImplementationClassUID, midsag.ImplementationVersionName
	if got != want || !bytes.Equal(rest, ds) {
		t.Errorf("parsed %+v and %d bytes, want %+v and %d", got, len(rest), want, len(ds))
	}
	for _, padded := range []string{"1.2.3\x00", "NSIL_PACS "} {
		if !bytes.Contains(b, []byte(padded)) {
			t.Errorf("%q not padded to even length", padded)
		}
	}
}

// TestParseRefusesDamage: a file without DICM, a truncated element and a
// group without the required UIDs are refusals with a reason code, never
// a panic: not_dicom without the PS3.10 7.1 prefix or the required
// elements (PS3.10 Table 7.1-1), truncated for an element running past
// the end.
func TestParseRefusesDamage(t *testing.T) {
	good := Wrap(Meta{SOPClassUID: "1.2", SOPInstanceUID: "1.3", TransferSyntaxUID: midsag.ExplicitVRLittleEndian}, nil)
	cases := map[string]struct {
		b    []byte
		want midsag.Reason
	}{
		"empty":       {nil, midsag.ReasonNotDICOM},
		"no DICM":     {make([]byte, 200), midsag.ReasonNotDICOM},
		"truncated":   {good[:150], midsag.ReasonTruncated},
		"no UIDs":     {Wrap(Meta{}, nil), midsag.ReasonNotDICOM},
		"long length": {append(append([]byte(nil), good[:144]...), 0x02, 0x00, 0x02, 0x00, 'U', 'I', 0xFF, 0x7F), midsag.ReasonTruncated},
		"OB cut":      {append(append([]byte(nil), good[:144]...), 0x02, 0x00, 0x01, 0x00, 'O', 'B', 0, 0), midsag.ReasonTruncated},
	}
	for name, c := range cases {
		_, _, err := Parse(c.b)
		if r, ok := midsag.ReasonOf(err); !ok || r != c.want {
			t.Errorf("%s: %v, want reason %s", name, err, c.want)
		}
	}
}

// TestReadMetaWithoutPreamble: ReadMeta reads a bare group 0002 (as
// preprocess's lenient mode meets it) and stops at the first element of
// another group, which it does not consume.
func TestReadMetaWithoutPreamble(t *testing.T) {
	b := Header(Meta{TransferSyntaxUID: midsag.ImplicitVRLittleEndian}, 0)[PrefixLen:]
	ds := []byte{0x08, 0x00, 0x18, 0x00, 4, 0, 0, 0, '1', '.', '2', 0}
	m, n, err := ReadMeta(append(append([]byte(nil), b...), ds...))
	if err != nil || m.TransferSyntaxUID != midsag.ImplicitVRLittleEndian || n != len(b) {
		t.Errorf("meta %+v, %d bytes of %d, %v", m, n, len(b), err)
	}
	if !LongVR("OB") || !LongVR("UV") || LongVR("UI") || LongVR("US") {
		t.Error("LongVR disagrees with PS3.5 Table 7.1-1")
	}
}
