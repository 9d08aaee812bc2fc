package main

import (
	"bytes"
	"context"
	"encoding/json"
	"fmt"
	"os"
	"path/filepath"
	"strings"
	"testing"

	"github.com/midsag/midsag"
	"github.com/midsag/midsag/server/store"
)

// TestStoreCheckVerb: midsag store check passes a sound data folder (exit
// 0, every instance counted, the notice printed), and after one spool file
// is truncated names that instance as corrupt and exits 1; --json gives
// the same finding.
func TestStoreCheckVerb(t *testing.T) {
	dir := t.TempDir()
	st, err := store.Open(dir, store.Options{})
	if err != nil {
		t.Fatal(err)
	}
	var insts []store.Instance
	for i := range 3 {
		sop := fmt.Sprintf("1.9.1.%d", i)
		in, _, err := st.Put(context.Background(), store.Instance{StudyInstanceUID: "1.9", SeriesInstanceUID: "1.9.1", SOPInstanceUID: sop,
			SOPClassUID: midsag.MRImageStorage, Origin: "rest"}, []byte("instance "+sop))
		if err != nil {
			t.Fatal(err)
		}
		insts = append(insts, in)
	}
	st.Close()
	var out, errb bytes.Buffer
	if code := run(context.Background(), []string{"store", "check", dir}, &out, &errb); code != exitOK ||
		!strings.Contains(out.String(), "3 instances") || !strings.Contains(out.String(), "sound") || !strings.Contains(out.String(), midsag.Notice) {
		t.Fatalf("sound store: exit %d\n%s%s", code, out.String(), errb.String())
	}
	if err := os.Truncate(filepath.Join(dir, filepath.FromSlash(insts[1].Path)), 4); err != nil {
		t.Fatal(err)
	}
	out.Reset()
	if code := run(context.Background(), []string{"store", "check", dir}, &out, &errb); code != exitRuntime ||
		!strings.Contains(out.String(), "corrupt") || !strings.Contains(out.String(), insts[1].SOPInstanceUID) {
		t.Errorf("truncated file: exit %d\n%s", code, out.String())
	}
	out.Reset()
	run(context.Background(), []string{"store", "check", "--json", dir}, &out, &errb)
	var rep struct {
		Instances int  `json:"instances"`
		Damaged   bool `json:"damaged"`
		Problems  []struct {
			Kind string `json:"kind"`
		} `json:"problems"`
	}
	if err := json.Unmarshal(out.Bytes(), &rep); err != nil || rep.Instances != 3 || !rep.Damaged || len(rep.Problems) != 1 || rep.Problems[0].Kind != "corrupt" {
		t.Errorf("--json: %+v, %v\n%s", rep, err, out.String())
	}
}
