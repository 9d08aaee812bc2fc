package dimse

import (
	"context"
	"encoding/json"
	"os"
	"os/exec"
	"path/filepath"
	"strings"
	"testing"
	"time"

	"github.com/midsag/midsag"
	"github.com/midsag/midsag/internal/testtool"
	"github.com/midsag/midsag/part10"
)

// TestStorageSOPClassesMatchPydicom compares StorageSOPClasses with the
// Storage SOP Classes of PS3.6 Table A-1 as pydicom's UID dictionary
// (pydicom/_uid_dict.py) lists them: the same UIDs, keywords and
// retired marks.
func TestStorageSOPClassesMatchPydicom(t *testing.T) {
	py := testtool.Python(t, "pydicom")
	out, err := exec.Command(py, "-c", `
import json
from pydicom._uid_dict import UID_dictionary as D
print(json.dumps({k: [v[4], bool(v[3])] for k, v in D.items()
    if v[1] == 'SOP Class' and k.startswith('1.2.840.10008.5.1.4.1.1.') and 'Storage' in v[4]}))
`).Output()
	if err != nil {
		t.Fatalf("pydicom: %v", err)
	}
	var want map[string][2]any
	if err := json.Unmarshal(out, &want); err != nil {
		t.Fatal(err)
	}
	got := map[string]SOPClass{}
	for _, c := range StorageSOPClasses {
		got[c.UID] = c
	}
	for uid, w := range want {
		c, ok := got[uid]
		if !ok {
			t.Errorf("pydicom lists %s (%v), the table does not", uid, w[0])
			continue
		}
		if c.Keyword != w[0] || c.Retired != w[1] {
			t.Errorf("%s: table has %q retired=%v, pydicom %v retired=%v", uid, c.Keyword, c.Retired, w[0], w[1])
		}
	}
	for uid := range got {
		if _, ok := want[uid]; !ok {
			t.Errorf("the table lists %s, pydicom does not", uid)
		}
	}
	// PS3.4 B.5 (from memory): CT Image Storage and MR Image Storage.
	for _, uid := range []string{"1.2.840.10008.5.1.4.1.1.2", midsag.MRImageStorage, midsag.ComprehensiveSRStorage} {
		if _, ok := got[uid]; !ok {
			t.Errorf("%s missing", uid)
		}
	}
}

// TestParseSOPClasses: keywords of PS3.6 Table A-1 and UIDs are taken,
// anything else refused.
func TestParseSOPClasses(t *testing.T) {
	got, err := ParseSOPClasses("CTImageStorage, 1.2.840.10008.5.1.4.1.1.128 ,")
	if err != nil || len(got) != 2 || got[0] != "1.2.840.10008.5.1.4.1.1.2" || got[1] != "1.2.840.10008.5.1.4.1.1.128" {
		t.Errorf("ParseSOPClasses = %v, %v", got, err)
	}
	if _, err := ParseSOPClasses("CTImage"); err == nil {
		t.Error("an unknown keyword was taken")
	}
}

// pydicomCopy writes a copy of a pydicom test file with the given Python
// statements applied to its dataset ds (pydicom 2.3), for storescu.
func pydicomCopy(t *testing.T, name, edit string) string {
	t.Helper()
	py := testtool.Python(t, "pydicom")
	src := testtool.PydicomFile(t, name)
	dst := filepath.Join(t.TempDir(), name)
	script := "import pydicom, sys\nds = pydicom.dcmread(sys.argv[1])\n" + edit + "\nds.save_as(sys.argv[2], write_like_original=False)\n"
	if out, err := exec.Command(py, "-c", script, src, dst).CombinedOutput(); err != nil {
		t.Fatalf("pydicom: %v\n%s", err, out)
	}
	return dst
}

// TestStorescuCTBesideMR: DCMTK storescu sends a phantom MR study and
// pydicom's CT_small.dcm (CT Image Storage, PS3.4 B.5) in one
// association to a listener with the default classes: the whole transfer
// succeeds and every instance, the CT included, reaches the handler.
func TestStorescuCTBesideMR(t *testing.T) {
	study, sent := studyDir(t, 2, midsag.ExplicitVRLittleEndian)
	ct := testtool.PydicomFile(t, "CT_small.dcm")
	var got received
	_, _, port := startSCP(t, Config{}, got.handler(StatusSuccess))
	out, err := dcmtk(t, "storescu", "-aet", "PACS", "-aec", "MIDSAG", "+sd", "127.0.0.1", port, study, ct)
	if err != nil {
		t.Fatalf("storescu: %v\n%s", err, out)
	}
	if got.count() != len(sent)+1 {
		t.Fatalf("handler got %d instances, storescu sent %d\n%s", got.count(), len(sent)+1, out)
	}
}

// TestStorescuOwnOutputAndIgnored: an instance whose SOP Instance UID is
// under midsag.OutputUIDRoot, and one of an ignored class, are answered
// with success (storescu exits 0) and never reach the handler.
func TestStorescuOwnOutputAndIgnored(t *testing.T) {
	own := pydicomCopy(t, "CT_small.dcm", "ds.SOPInstanceUID = '"+midsag.NewOutputUID()+"'\nds.file_meta.MediaStorageSOPInstanceUID = ds.SOPInstanceUID")
	mr := pydicomCopy(t, "MR_small.dcm", "")
	var got received
	s, _, port := startSCP(t, Config{IgnoreSOPClasses: []string{midsag.MRImageStorage}}, got.handler(StatusSuccess))
	out, err := dcmtk(t, "storescu", "-aet", "PACS", "-aec", "MIDSAG", "127.0.0.1", port, own, mr)
	if err != nil {
		t.Fatalf("storescu: %v\n%s", err, out)
	}
	if st := s.Stats(); got.count() != 0 || st.OwnOutputs != 1 || st.Ignored != 1 || st.StoresOK != 2 {
		t.Errorf("handler got %d, stats %+v; want 0 handled, 1 own output, 1 ignored", got.count(), st)
	}
}

// TestStorescuPrintsRefusalStatus: DCMTK storescu (-d dumps the
// response's command set) shows Status A700 Refused: Out of Resources
// (PS3.4 B.2.3) and the Error Comment (0000,0902) for a dataset above the
// limit, and the handler never sees it.
func TestStorescuPrintsRefusalStatus(t *testing.T) {
	var got received
	s, _, port := startSCP(t, Config{MaxDatasetBytes: 2048}, got.handler(StatusSuccess))
	out, _ := dcmtk(t, "storescu", "-d", "-aet", "PACS", "-aec", "MIDSAG", "127.0.0.1", port, testtool.PydicomFile(t, "CT_small.dcm"))
	for _, w := range []string{"0xa700: Refused: Out of resources", "(0000,0902) LO [data set above the limit of 2048 bytes]"} {
		if !strings.Contains(string(out), w) {
			t.Errorf("storescu output lacks %q:\n%s", w, out)
		}
	}
	if got.count() != 0 || s.Stats().StoresFailed != 1 {
		t.Errorf("handler got %d, stats %+v", got.count(), s.Stats())
	}
}

// TestStoreDataSetMismatch: a C-STORE whose dataset is CT Image Storage
// (pydicom's CT_small.dcm) sent under MR Image Storage, the class its
// File Meta names (Client takes the command's class from there, storescu
// from the dataset, so storescu cannot send this), is answered A900
// Error: Data Set does not match SOP Class (PS3.4 B.2.3), not success.
func TestStoreDataSetMismatch(t *testing.T) {
	ct, err := os.ReadFile(testtool.PydicomFile(t, "CT_small.dcm"))
	if err != nil {
		t.Fatal(err)
	}
	meta, ds, err := part10.Parse(ct)
	if err != nil {
		t.Fatal(err)
	}
	meta.SOPClassUID = midsag.MRImageStorage
	b := part10.Wrap(meta, ds)
	var got received
	s, addr, _ := startSCP(t, Config{}, got.handler(StatusSuccess))
	c := &Client{CallingAE: "A", CalledAE: "MIDSAG", Timeout: 10 * time.Second}
	st, err := c.Store(context.Background(), addr, [][]byte{b})
	if err != nil {
		t.Fatal(err)
	}
	if st[0] != StatusDataSetMismatch || got.count() != 0 || s.Stats().StoresFailed != 1 {
		t.Errorf("status %04X, handler got %d, stats %+v; want A900 and nothing handled", st[0], got.count(), s.Stats())
	}
}
