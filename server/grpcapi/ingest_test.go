package grpcapi

import (
	"bytes"
	"context"
	"errors"
	"fmt"
	"io"
	"net"
	"net/http"
	"os"
	"path/filepath"
	"strings"
	"testing"
	"time"

	"github.com/midsag/midsag"
	"github.com/midsag/midsag/inputs"
	"github.com/midsag/midsag/models"
	"github.com/midsag/midsag/phantom"
	"github.com/midsag/midsag/preprocess"
	"github.com/midsag/midsag/server"
	"github.com/midsag/midsag/server/store"
)

// noModels is a registry without models: these tests only ingest.
type noModels struct{}

func (noModels) Acquire(string, string) (midsag.Model, func(), error) {
	return nil, nil, errors.New("no model in this test")
}
func (noModels) List() []models.RegistryEntry { return nil }

// realCore is a Core over a real SQLite store in a temporary folder and
// the real preprocessor; it is not Run, so nothing is scored.
func realCore(t *testing.T) (*server.Core, *store.Store, string) {
	t.Helper()
	dir := t.TempDir()
	st, err := store.Open(dir, store.Options{})
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() { st.Close() })
	core := server.New(server.Config{Store: st, Registry: noModels{}, Pre: preprocess.New(preprocess.Options{})})
	return core, st, dir
}

// spoolFiles lists every file under the store's spool folder.
func spoolFiles(t *testing.T, dir string) []string {
	t.Helper()
	var out []string
	filepath.WalkDir(filepath.Join(dir, "spool"), func(p string, d os.DirEntry, err error) error {
		if err == nil && !d.IsDir() {
			out = append(out, p)
		}
		return nil
	})
	return out
}

// TestRESTRefusalStoresNothing: a zip refused at its third entry (beyond
// MaxEntryBytes), a zip of two studies and a multipart body broken after
// two good parts are refused, and the real store holds no instance and
// the spool no file afterwards, not even the spooled archive; the same
// good entries alone are stored.
func TestRESTRefusalStoresNothing(t *testing.T) {
	core, st, dir := realCore(t)
	files := phantomStudy(t)
	maxEntry := int64(0)
	for _, f := range files[:2] {
		maxEntry = max(maxEntry, int64(len(f.Data)))
	}
	srv := newHTTP(t, Config{Backend: core, Limits: inputs.Limits{MaxEntryBytes: maxEntry}}, nil)

	big := phantom.File{Name: "big.dcm", Data: append(bytes.Clone(files[2].Data), make([]byte, maxEntry)...)}
	r := runCurl(t, "-H", "Content-Type: application/zip", "--data-binary", "@"+writeTemp(t, "a.zip", zipOf(t, []phantom.File{files[0], files[1], big})),
		srv.URL+"/v1/studies:score")
	wantRefusal(t, r, http.StatusRequestEntityTooLarge, midsag.ReasonTooLarge)

	other, _, err := phantom.GenerateStudy(phantom.Options{Studies: 1, Seed: 2, NoDecoys: true}, 0)
	if err != nil {
		t.Fatal(err)
	}
	r = runCurl(t, "-H", "Content-Type: application/zip", "--data-binary", "@"+writeTemp(t, "b.zip", zipOf(t, []phantom.File{files[0], other[0]})),
		srv.URL+"/v1/studies:score")
	wantRefusal(t, r, http.StatusBadRequest, midsag.ReasonMultipleStudies)

	body, boundary := relatedBody(t, [][]byte{files[0].Data, files[1].Data}, []string{"application/dicom", "application/dicom"})
	cut := writeTemp(t, "cut.bin", body[:len(body)-len(boundary)-8])
	r = runCurl(t, "-H", `Content-Type: multipart/related; type="application/dicom"; boundary=`+boundary, "--data-binary", "@"+cut,
		srv.URL+"/v1/studies:score")
	wantRefusal(t, r, http.StatusBadRequest, midsag.ReasonTruncated)

	stats, err := st.Stats(context.Background())
	if err != nil {
		t.Fatal(err)
	}
	if stats.Instances != 0 || len(spoolFiles(t, dir)) != 0 {
		t.Errorf("after refusals: %d instances stored, spool files %v; want none", stats.Instances, spoolFiles(t, dir))
	}
	// The same entries without the refused one are stored (and then not
	// scored: this registry has no model, an internal error).
	runCurl(t, "-H", "Content-Type: application/zip", "--data-binary", "@"+writeTemp(t, "c.zip", zipOf(t, files[:2])), srv.URL+"/v1/studies:score")
	if stats, _ := st.Stats(context.Background()); stats.Instances != 2 {
		t.Errorf("good zip: %d instances stored, want 2", stats.Instances)
	}
}

// TestStalledUploadsClosed: over a real connection, a request that
// declares 500 MB and sends nothing, and one that sends one byte every
// 300 ms (below a minimum of 100 B/s over a 1 s window), are both
// answered with a truncated refusal and closed within a few windows; the
// spool holds nothing afterwards. The times are logged, not judged
// beyond that bound.
func TestStalledUploadsClosed(t *testing.T) {
	core, _, dir := realCore(t)
	srv := newHTTP(t, Config{Backend: core, ReadIdle: time.Second, MinReadRate: 100}, nil)
	addr := strings.TrimPrefix(srv.URL, "http://")
	for _, tc := range []struct {
		name string
		drip time.Duration
	}{{"stalled", 0}, {"one byte per 300 ms", 300 * time.Millisecond}} {
		t.Run(tc.name, func(t *testing.T) {
			conn, err := net.Dial("tcp", addr)
			if err != nil {
				t.Fatal(err)
			}
			defer conn.Close()
			start := time.Now()
			fmt.Fprintf(conn, "POST /v1/studies:score HTTP/1.1\r\nHost: x\r\nContent-Type: application/dicom\r\nContent-Length: 500000000\r\n\r\n")
			stop := make(chan struct{})
			defer close(stop)
			if tc.drip > 0 {
				go func() {
					for {
						select {
						case <-stop:
							return
						case <-time.After(tc.drip):
							if _, err := conn.Write([]byte{0}); err != nil {
								return
							}
						}
					}
				}()
			}
			conn.SetReadDeadline(time.Now().Add(15 * time.Second))
			resp, err := io.ReadAll(conn)
			took := time.Since(start)
			t.Logf("closed after %v: %.60q", took, resp)
			if err != nil {
				t.Fatalf("connection not closed within 15 s: %v", err)
			}
			if !bytes.Contains(resp, []byte(`"truncated"`)) {
				t.Errorf("response %q is not the truncated refusal", resp)
			}
		})
	}
	if files := spoolFiles(t, dir); len(files) != 0 {
		t.Errorf("spool files left: %v", files)
	}
}
