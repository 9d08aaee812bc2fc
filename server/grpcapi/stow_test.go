package grpcapi

import (
	"encoding/json"
	"net/http"
	"testing"
)

// decodeDICOMJSON parses a STOW-RS response as the DICOM JSON model
// (PS3.18 F.2): an object keyed by 8 hex digits, each attribute with "vr"
// and, when it has a value, "Value".
func decodeDICOMJSON(t *testing.T, body []byte) map[string]struct {
	VR    string            `json:"vr"`
	Value []json.RawMessage `json:"Value"`
} {
	t.Helper()
	var ds map[string]struct {
		VR    string            `json:"vr"`
		Value []json.RawMessage `json:"Value"`
	}
	if err := json.Unmarshal(body, &ds); err != nil {
		t.Fatalf("response %q is not a DICOM JSON object: %v", body, err)
	}
	return ds
}

type stowItem map[string]struct {
	VR    string `json:"vr"`
	Value []any  `json:"Value"`
}

func stowItems(t *testing.T, raw []json.RawMessage) []stowItem {
	t.Helper()
	var out []stowItem
	for _, r := range raw {
		var it stowItem
		if err := json.Unmarshal(r, &it); err != nil {
			t.Fatal(err)
		}
		out = append(out, it)
	}
	return out
}

// TestSTOWRSResponsePS3_18 checks the Store Instances response against
// PS3.18 10.5.3: Referenced SOP Sequence (0008,1199) with Referenced SOP
// Class/Instance UID (0008,1150/1155) for each stored part, Failed SOP
// Sequence (0008,1198) with Failure Reason (0008,1197, VR US) for the
// rest, 202 when some failed, 409 when all failed (status codes from
// memory), media type application/dicom+json.
func TestSTOWRSResponsePS3_18(t *testing.T) {
	files := phantomStudy(t)[:3]
	fake := newFake()
	srv := newHTTP(t, Config{Backend: fake}, nil)

	parts := [][]byte{files[0].Data, files[1].Data, []byte("this part is not DICOM at all, just text"), files[2].Data}
	body, boundary := relatedBody(t, parts, []string{"application/dicom", "application/dicom", "application/dicom", "application/dicom"})
	p := writeTemp(t, "stow.bin", body)
	r := runCurl(t, "-H", `Content-Type: multipart/related; type="application/dicom"; boundary=`+boundary,
		"-H", "Accept: application/dicom+json", "--data-binary", "@"+p, srv.URL+"/dicomweb/studies")
	if r.code != http.StatusAccepted {
		t.Fatalf("status %d, want 202; body %s", r.code, r.body)
	}
	if ct := r.header.Get("Content-Type"); ct != "application/dicom+json" {
		t.Errorf("Content-Type %q", ct)
	}
	ds := decodeDICOMJSON(t, r.body)
	ref, failed := ds["00081199"], ds["00081198"]
	if ref.VR != "SQ" || failed.VR != "SQ" {
		t.Fatalf("sequences have VR %q and %q, want SQ", ref.VR, failed.VR)
	}
	checkReferenced(t, fake, stowItems(t, ref.Value), 3)
	fails := stowItems(t, failed.Value)
	if len(fails) != 1 {
		t.Fatalf("%d failed items, want 1", len(fails))
	}
	reason := fails[0]["00081197"]
	if reason.VR != "US" || len(reason.Value) != 1 || reason.Value[0] != float64(0xC000) {
		t.Errorf("failure reason %v, want US 0xC000 (cannot understand, from memory)", reason)
	}
	if _, scores := fake.counts(); scores != 0 {
		t.Errorf("STOW-RS asked for %d scores; the settle scheduler scores", scores)
	}
	if originsOf(fake)[0].Listener != "stow" {
		t.Errorf("origin %+v", originsOf(fake)[0])
	}

	body, boundary = relatedBody(t, [][]byte{files[0].Data}, []string{"application/dicom"})
	one := writeTemp(t, "stow2.bin", body)
	stowOtherStudy(t, srv.URL, fake, one, boundary)

	// The right study in the URL: all stored → 200.
	r = runCurl(t, "-H", `Content-Type: multipart/related; type="application/dicom"; boundary=`+boundary,
		"--data-binary", "@"+one, srv.URL+"/dicomweb/studies/"+ingestedOf(fake)[0].StudyInstanceUID)
	if r.code != http.StatusOK {
		t.Errorf("status %d, want 200; body %s", r.code, r.body)
	}

	// Not multipart/related → 415 with the JSON error body.
	r = runCurl(t, "-H", "Content-Type: application/dicom", "--data-binary", "@"+one, srv.URL+"/dicomweb/studies")
	wantRefusal(t, r, http.StatusUnsupportedMediaType, "not_dicom")
}

// checkReferenced checks the Referenced SOP items (PS3.18 10.5.3): want
// of them, each naming the class and instance of the stored instance in
// the same order.
func checkReferenced(t *testing.T, fake *fakeBackend, refs []stowItem, want int) {
	t.Helper()
	if len(refs) != want {
		t.Fatalf("%d referenced items, want %d", len(refs), want)
	}
	stored := ingestedOf(fake)
	for i, it := range refs {
		cls, inst := it["00081150"], it["00081155"]
		if cls.VR != "UI" || inst.VR != "UI" || len(cls.Value) != 1 || len(inst.Value) != 1 {
			t.Fatalf("referenced item %d: %v", i, it)
		}
		if inst.Value[0] != stored[i].SOPInstanceUID || cls.Value[0] != stored[i].SOPClassUID {
			t.Errorf("referenced item %d names %v, stored %+v", i, it, stored[i])
		}
	}
}

// stowOtherStudy posts the one-part body at path to /studies/{study} of
// another study: the instance fails with 0xA900 (from memory), is still
// named, nothing is stored, and all failed gives 409.
func stowOtherStudy(t *testing.T, base string, fake *fakeBackend, path, boundary string) {
	t.Helper()
	before, _ := fake.counts()
	r := runCurl(t, "-H", `Content-Type: multipart/related; type="application/dicom"; boundary=`+boundary,
		"--data-binary", "@"+path, base+"/dicomweb/studies/1.2.3.999")
	if r.code != http.StatusConflict {
		t.Fatalf("status %d, want 409; body %s", r.code, r.body)
	}
	ds := decodeDICOMJSON(t, r.body)
	if _, ok := ds["00081199"]; ok {
		t.Error("Referenced SOP Sequence present although nothing was stored")
	}
	fails := stowItems(t, ds["00081198"].Value)
	if len(fails) != 1 || fails[0]["00081197"].Value[0] != float64(0xA900) || fails[0]["00081155"].Value[0] != ingestedOf(fake)[0].SOPInstanceUID {
		t.Errorf("failed items %v", fails)
	}
	if after, _ := fake.counts(); after != before {
		t.Errorf("an instance of another study was stored")
	}
}
