package grpcapi

import (
	"bufio"
	"bytes"
	"context"
	"encoding/json"
	"io"
	"net/http"
	"net/http/httptest"
	"net/textproto"
	"os"
	"os/exec"
	"path/filepath"
	"strconv"
	"strings"
	"sync"
	"testing"
	"time"

	"github.com/midsag/midsag"
	"github.com/midsag/midsag/inputs"
)

// The HTTP tests drive the handler with the real curl (/usr/bin/curl) over
// 127.0.0.1, so requests are what a user's command line sends.

type curlResponse struct {
	code   int
	header http.Header
	body   []byte
}

func runCurl(t *testing.T, args ...string) curlResponse {
	t.Helper()
	bin, err := exec.LookPath("curl")
	if err != nil {
		t.Fatalf("curl is required for this test: %v", err)
	}
	dir := t.TempDir()
	hdr, body := filepath.Join(dir, "headers"), filepath.Join(dir, "body")
	out, err := exec.Command(bin, append([]string{"-sS", "-D", hdr, "-o", body, "-w", "%{http_code}"}, args...)...).Output()
	if err != nil {
		t.Fatalf("curl %v: %v", args, err)
	}
	var r curlResponse
	if r.code, err = strconv.Atoi(string(out)); err != nil {
		t.Fatalf("curl status %q: %v", out, err)
	}
	raw, err := os.ReadFile(hdr)
	if err != nil {
		t.Fatal(err)
	}
	// A "100 Continue" block may come first; the final response is last.
	blocks := strings.Split(strings.TrimSpace(string(raw)), "\r\n\r\n")
	tp := textproto.NewReader(bufio.NewReader(strings.NewReader(blocks[len(blocks)-1] + "\r\n\r\n")))
	if _, err := tp.ReadLine(); err != nil {
		t.Fatal(err)
	}
	mh, err := tp.ReadMIMEHeader()
	if err != nil {
		t.Fatal(err)
	}
	r.header = http.Header(mh)
	if r.body, err = os.ReadFile(body); err != nil && !os.IsNotExist(err) {
		t.Fatal(err)
	}
	return r
}

func newHTTP(t *testing.T, cfg Config, extra map[string]http.Handler) *httptest.Server {
	t.Helper()
	h, err := NewHTTPHandler(context.Background(), cfg, extra)
	if err != nil {
		t.Fatal(err)
	}
	srv := httptest.NewServer(h)
	t.Cleanup(srv.Close)
	return srv
}

func writeTemp(t *testing.T, name string, data []byte) string {
	t.Helper()
	p := filepath.Join(t.TempDir(), name)
	if err := os.WriteFile(p, data, 0o600); err != nil {
		t.Fatal(err)
	}
	return p
}

// wantRefusal checks a response is the JSON error body with the status
// and reason given and the research notice.
func wantRefusal(t *testing.T, r curlResponse, code int, reason midsag.Reason) midsag.RefusalBody {
	t.Helper()
	var body midsag.RefusalBody
	if err := json.Unmarshal(r.body, &body); err != nil {
		t.Fatalf("status %d, body %q is not the JSON error body: %v", r.code, r.body, err)
	}
	if r.code != code || body.Error.Reason != reason || body.Error.Message == "" || body.Notice != midsag.Notice {
		t.Errorf("got %d %+v, want %d with reason %s, a message and the notice", r.code, body, code, reason)
	}
	return body
}

// contractKeys are the result JSON field names of docs/ARCHITECTURE.md and the
// record fields; the REST body must hold each (EmitUnpopulated).
var contractKeys = []string{"result_id", "created_at", "study_instance_uid", "series_instance_uid",
	"center_sop_instance_uid", "slices", "series_candidates", "model", "raw_output", "probability",
	"calibrated_probability", "calibration_method", "threshold", "decision", "quality_flags", "notice",
	"timings_ms", "version", "status", "reason", "message", "finished_at"}

func TestCurlScoreZip(t *testing.T) {
	files := phantomStudy(t)
	fake := newFake()
	srv := newHTTP(t, Config{Backend: fake}, nil)
	zipPath := writeTemp(t, "study.zip", zipOf(t, files))

	r := runCurl(t, "-H", "Content-Type: application/zip", "--data-binary", "@"+zipPath,
		srv.URL+"/v1/studies:score?model=midsag-demo&explain=true")
	if r.code != http.StatusOK {
		t.Fatalf("status %d, body %s", r.code, r.body)
	}
	var got map[string]any
	if err := json.Unmarshal(r.body, &got); err != nil {
		t.Fatal(err)
	}
	for _, k := range contractKeys {
		if _, ok := got[k]; !ok {
			t.Errorf("result JSON lacks %q", k)
		}
	}
	if got["status"] != "done" || got["decision"] != "compression" || got["study_instance_uid"] == "" {
		t.Errorf("result %v", got)
	}
	ingested, scores := fake.counts()
	if ingested != len(files) || scores != 1 {
		t.Fatalf("ingested %d of %d files, %d score calls", ingested, len(files), scores)
	}
	req := scoresOf(fake)[0]
	if len(req.SOPInstanceUIDs) != len(files) || req.Model != "midsag-demo" || !req.Explain || req.Async {
		t.Errorf("score request %+v", req)
	}
	if originsOf(fake)[0].Listener != "rest" {
		t.Errorf("origin %+v", originsOf(fake)[0])
	}

	// The same zip as application/octet-stream is recognised by its
	// signature (PK\x03\x04, APPNOTE.TXT 4.3.7).
	r = runCurl(t, "-H", "Content-Type: application/octet-stream", "--data-binary", "@"+zipPath, srv.URL+"/v1/studies:score")
	if r.code != http.StatusOK {
		t.Errorf("zip as octet-stream: status %d, body %s", r.code, r.body)
	}
}

func TestCurlScoreSingleAndMultipartRelated(t *testing.T) {
	files := phantomStudy(t)
	fake := newFake()
	srv := newHTTP(t, Config{Backend: fake}, nil)

	one := writeTemp(t, "one.dcm", files[0].Data)
	r := runCurl(t, "-H", "Content-Type: application/dicom", "--data-binary", "@"+one, srv.URL+"/v1/studies:score")
	if r.code != http.StatusOK {
		t.Fatalf("application/dicom: status %d, body %s", r.code, r.body)
	}

	// curl -F makes multipart/form-data; multipart/related (PS3.18
	// 8.6.1.2) is built here and sent as is with its header.
	parts := [][]byte{files[0].Data, files[1].Data, files[2].Data}
	body, boundary := relatedBody(t, parts, []string{"application/dicom", "application/dicom", "application/dicom"})
	p := writeTemp(t, "related.bin", body)
	r = runCurl(t, "-H", `Content-Type: multipart/related; type="application/dicom"; boundary=`+boundary,
		"--data-binary", "@"+p, srv.URL+"/v1/studies:score")
	if r.code != http.StatusOK {
		t.Fatalf("multipart/related: status %d, body %s", r.code, r.body)
	}
	if n := len(scoresOf(fake)[1].SOPInstanceUIDs); n != 3 {
		t.Errorf("multipart/related scored %d instances, want 3", n)
	}

	// A part that is not application/dicom refuses the whole upload.
	body, boundary = relatedBody(t, [][]byte{files[0].Data, []byte("hello")}, []string{"application/dicom", "text/plain"})
	p = writeTemp(t, "mixed.bin", body)
	r = runCurl(t, "-H", `Content-Type: multipart/related; type="application/dicom"; boundary=`+boundary,
		"--data-binary", "@"+p, srv.URL+"/v1/studies:score")
	wantRefusal(t, r, http.StatusUnsupportedMediaType, midsag.ReasonNotDICOM)
}

func TestCurlScoreGzipRefused(t *testing.T) {
	fake := newFake()
	srv := newHTTP(t, Config{Backend: fake}, nil)
	// A gzip member starts 1f 8b (RFC 1952 2.3.1).
	gz := writeTemp(t, "study.dcm.gz", append([]byte{0x1f, 0x8b, 0x08, 0x00}, bytes.Repeat([]byte{0}, 200)...))
	r := runCurl(t, "--data-binary", "@"+gz, srv.URL+"/v1/studies:score")
	body := wantRefusal(t, r, http.StatusUnsupportedMediaType, midsag.ReasonNotDICOM)
	if !strings.Contains(body.Error.Message, "gzip is not accepted") {
		t.Errorf("message %q does not say gzip is refused", body.Error.Message)
	}
	if ingested, scores := fake.counts(); ingested+scores != 0 {
		t.Errorf("a refused body reached the backend: %d ingests, %d scores", ingested, scores)
	}
}

func TestCurlScoreTooLarge(t *testing.T) {
	files := phantomStudy(t)
	fake := newFake()
	srv := newHTTP(t, Config{Backend: fake, MaxBodyBytes: 4096}, nil)
	big := writeTemp(t, "big.dcm", files[0].Data) // a phantom slice is far above 4 KiB
	// Content-Length above the limit: refused before reading.
	r := runCurl(t, "-H", "Content-Type: application/dicom", "--data-binary", "@"+big, srv.URL+"/v1/studies:score")
	wantRefusal(t, r, http.StatusRequestEntityTooLarge, midsag.ReasonTooLarge)
	// Chunked, so no Content-Length: refused while streaming.
	r = runCurl(t, "-H", "Content-Type: application/dicom", "-H", "Transfer-Encoding: chunked",
		"--data-binary", "@"+big, srv.URL+"/v1/studies:score")
	wantRefusal(t, r, http.StatusRequestEntityTooLarge, midsag.ReasonTooLarge)
	if ingested, _ := fake.counts(); ingested != 0 {
		t.Errorf("%d instances ingested from oversized bodies", ingested)
	}
}

// TestCurlScoreInputLimits: the input limits (inputs.Limits) hold for
// every kind of upload: a zip with more entries than MaxEntries, a
// multipart/related body with more parts, and a part or a single body
// beyond MaxEntryBytes are refused as too_large with 413 (RFC 9110
// 15.5.14) and nothing is ingested; STOW-RS reports the part as failed.
func TestCurlScoreInputLimits(t *testing.T) {
	files := phantomStudy(t)
	fake := newFake()
	entry := int64(len(files[0].Data)) - 1
	srv := newHTTP(t, Config{Backend: fake, Limits: inputs.Limits{MaxEntries: 2, MaxEntryBytes: entry}}, nil)
	zipPath := writeTemp(t, "three.zip", zipOf(t, files[:3]))
	r := runCurl(t, "-H", "Content-Type: application/zip", "--data-binary", "@"+zipPath, srv.URL+"/v1/studies:score")
	wantRefusal(t, r, http.StatusRequestEntityTooLarge, midsag.ReasonTooLarge)

	body, boundary := relatedBody(t, [][]byte{files[0].Data}, []string{"application/dicom"})
	p := writeTemp(t, "big-part.bin", body)
	r = runCurl(t, "-H", `Content-Type: multipart/related; type="application/dicom"; boundary=`+boundary,
		"--data-binary", "@"+p, srv.URL+"/v1/studies:score")
	wantRefusal(t, r, http.StatusRequestEntityTooLarge, midsag.ReasonTooLarge)
	// STOW-RS stores instance by instance (PS3.18 10.5): the part beyond
	// the limit is one failed item with 0xA700 Out of Resources, and with
	// none stored the answer is 409.
	r = runCurl(t, "-H", `Content-Type: multipart/related; type="application/dicom"; boundary=`+boundary,
		"--data-binary", "@"+p, srv.URL+"/dicomweb/studies")
	if r.code != http.StatusConflict {
		t.Errorf("STOW-RS part beyond the limit: %d %s, want 409", r.code, r.body)
	} else if fails := stowItems(t, decodeDICOMJSON(t, r.body)["00081198"].Value); len(fails) != 1 || fails[0]["00081197"].Value[0] != float64(0xA700) {
		t.Errorf("STOW-RS part beyond the limit: failed items %v, want one with 0xA700", fails)
	}

	one := writeTemp(t, "one.dcm", files[0].Data)
	r = runCurl(t, "-H", "Content-Type: application/dicom", "--data-binary", "@"+one, srv.URL+"/v1/studies:score")
	wantRefusal(t, r, http.StatusRequestEntityTooLarge, midsag.ReasonTooLarge)
	if ingested, _ := fake.counts(); ingested != 0 {
		t.Errorf("%d instances ingested beyond the limits", ingested)
	}
}

func TestCurlScoreAsync(t *testing.T) {
	files := phantomStudy(t)
	fake := newFake()
	srv := newHTTP(t, Config{Backend: fake}, nil)
	zipPath := writeTemp(t, "study.zip", zipOf(t, files))
	r := runCurl(t, "-H", "Content-Type: application/zip", "--data-binary", "@"+zipPath, srv.URL+"/v1/studies:score?async=true")
	if r.code != http.StatusAccepted {
		t.Fatalf("status %d, body %s", r.code, r.body)
	}
	var got map[string]any
	if err := json.Unmarshal(r.body, &got); err != nil {
		t.Fatal(err)
	}
	id, _ := got["result_id"].(string)
	if id == "" || got["status"] != "pending" {
		t.Fatalf("async body %s", r.body)
	}
	if loc := r.header.Get("Location"); loc != "/v1/results/"+id {
		t.Errorf("Location %q, want /v1/results/%s", loc, id)
	}
	// The Location resolves through the gateway to the same record.
	r = runCurl(t, srv.URL+r.header.Get("Location"))
	if r.code != http.StatusOK || !strings.Contains(string(r.body), `"status":"pending"`) {
		t.Errorf("GET Location: %d %s", r.code, r.body)
	}
	if !scoresOf(fake)[0].Async {
		t.Error("Score was not asked for async")
	}
}

func TestCurlScoreRefusals(t *testing.T) {
	files := phantomStudy(t)
	fake := newFake()
	fake.setScoreErr(midsag.Rejectf(midsag.ReasonOverloaded, "the scoring queue is full"))
	srv := newHTTP(t, Config{Backend: fake}, nil)
	one := writeTemp(t, "one.dcm", files[0].Data)

	r := runCurl(t, "-H", "Content-Type: application/dicom", "--data-binary", "@"+one, srv.URL+"/v1/studies:score")
	wantRefusal(t, r, http.StatusTooManyRequests, midsag.ReasonOverloaded)
	if r.header.Get("Retry-After") == "" {
		t.Error("429 without Retry-After (RFC 6585 4)")
	}

	fake.setScoreErr(midsag.Rejectf(midsag.ReasonNoSagittalT2, "no series is sagittal T2"))
	r = runCurl(t, "-H", "Content-Type: application/dicom", "--data-binary", "@"+one, srv.URL+"/v1/studies:score")
	wantRefusal(t, r, http.StatusUnprocessableEntity, midsag.ReasonNoSagittalT2)

	notDICOM := writeTemp(t, "notes.txt", bytes.Repeat([]byte("not an image "), 20))
	r = runCurl(t, "-H", "Content-Type: application/dicom", "--data-binary", "@"+notDICOM, srv.URL+"/v1/studies:score")
	wantRefusal(t, r, http.StatusUnsupportedMediaType, midsag.ReasonNotDICOM)

	r = runCurl(t, "-H", "Content-Type: application/dicom", "--data-binary", "@"+one, srv.URL+"/v1/studies:score?async=maybe")
	wantRefusal(t, r, http.StatusBadRequest, midsag.ReasonBadRequest)

	r = runCurl(t, "-X", "POST", "-H", "Content-Type: application/dicom", srv.URL+"/v1/studies:score")
	wantRefusal(t, r, http.StatusBadRequest, midsag.ReasonNoInput)
}

func TestCurlGatewayRoutes(t *testing.T) {
	files := phantomStudy(t)
	fake := newFake()
	healthz := http.HandlerFunc(func(w http.ResponseWriter, _ *http.Request) { w.Write([]byte("ok")) })
	var (
		mu       sync.Mutex
		observed []string
	)
	srv := newHTTP(t, Config{Backend: fake, Tokens: []string{"s3cret"}, Observe: func(endpoint string, code int, _ time.Duration) {
		mu.Lock()
		defer mu.Unlock()
		observed = append(observed, endpoint)
	}}, map[string]http.Handler{"/healthz": healthz})
	auth := []string{"-H", "Authorization: Bearer s3cret"}
	one := writeTemp(t, "one.dcm", files[0].Data)

	// Without a token: 401 with the JSON body; /healthz stays open.
	r := runCurl(t, "-H", "Content-Type: application/dicom", "--data-binary", "@"+one, srv.URL+"/v1/studies:score")
	wantRefusal(t, r, http.StatusUnauthorized, midsag.ReasonUnauthenticated)
	r = runCurl(t, "-H", "Authorization: Bearer wrong", srv.URL+"/v1/models")
	wantRefusal(t, r, http.StatusUnauthorized, midsag.ReasonUnauthenticated)
	if r = runCurl(t, srv.URL+"/healthz"); r.code != http.StatusOK {
		t.Errorf("/healthz without token: %d", r.code)
	}

	r = runCurl(t, append(auth, "-H", "Content-Type: application/dicom", "--data-binary", "@"+one, srv.URL+"/v1/studies:score")...)
	if r.code != http.StatusOK {
		t.Fatalf("score: %d %s", r.code, r.body)
	}
	var scored map[string]any
	if err := json.Unmarshal(r.body, &scored); err != nil {
		t.Fatal(err)
	}
	id, study := scored["result_id"].(string), scored["study_instance_uid"].(string)

	// GET /v1/results/{id} returns the same shape as the score answer.
	r = runCurl(t, append(auth, srv.URL+"/v1/results/"+id)...)
	var got map[string]any
	if err := json.Unmarshal(r.body, &got); err != nil || r.code != http.StatusOK {
		t.Fatalf("GET result: %d %s", r.code, r.body)
	}
	for k := range scored {
		if _, ok := got[k]; !ok {
			t.Errorf("GET result lacks %q", k)
		}
	}

	checkResultList(t, srv.URL, auth, id, study)
	checkModelsAndOpenAPI(t, srv.URL, auth)

	r = runCurl(t, append(auth, srv.URL+"/v2/nothing")...)
	wantRefusal(t, r, http.StatusNotFound, midsag.ReasonNotFound)

	// Observe gets route patterns, never ids.
	mu.Lock()
	defer mu.Unlock()
	for _, e := range observed {
		if strings.Contains(e, id) || strings.Contains(e, study) {
			t.Errorf("Observe endpoint %q holds an id", e)
		}
	}
	if !slicesContain(observed, "GET /v1/results/{result_id}") || !slicesContain(observed, "POST /v1/studies:score") {
		t.Errorf("observed endpoints %v", observed)
	}
}

func slicesContain(s []string, v string) bool {
	for _, x := range s {
		if x == v {
			return true
		}
	}
	return false
}

// TestHeatmapRoute: GET /v1/results/{id}/heatmap.png serves an explained
// result's picture as image/png and answers 404 not_found otherwise.
func TestHeatmapRoute(t *testing.T) {
	fake := newFake()
	files := phantomStudy(t)
	h, err := NewHTTPHandler(context.Background(), Config{Backend: fake}, nil)
	if err != nil {
		t.Fatal(err)
	}
	srv := httptest.NewServer(h)
	defer srv.Close()
	post := func(q string) string {
		resp, err := http.Post(srv.URL+"/v1/studies:score"+q, "application/dicom", bytes.NewReader(files[0].Data))
		if err != nil {
			t.Fatal(err)
		}
		defer resp.Body.Close()
		var out struct {
			ResultID string `json:"result_id"`
		}
		json.NewDecoder(resp.Body).Decode(&out)
		return out.ResultID
	}
	explained, plain := post("?explain=true"), post("")
	for _, c := range []struct {
		id   string
		code int
	}{{explained, 200}, {plain, 404}, {"nope", 404}} {
		resp, err := http.Get(srv.URL + "/v1/results/" + c.id + "/heatmap.png")
		if err != nil {
			t.Fatal(err)
		}
		body, _ := io.ReadAll(resp.Body)
		resp.Body.Close()
		if resp.StatusCode != c.code {
			t.Errorf("%s: %d, want %d (%s)", c.id, resp.StatusCode, c.code, body)
		}
		if c.code == 200 && (resp.Header.Get("Content-Type") != "image/png" || !bytes.Equal(body, fakePNG)) {
			t.Errorf("heatmap %q %q", resp.Header.Get("Content-Type"), body)
		}
	}
}

// checkResultList checks GET /v1/results: the filtered list holds the one
// result with a next-page token, an unknown study gives an empty list,
// and malformed filters are bad requests (the gateway's own parse errors
// too), an unknown id not_found.
func checkResultList(t *testing.T, base string, auth []string, id, study string) {
	t.Helper()
	r := runCurl(t, append(auth, base+"/v1/results?study_instance_uid="+study+"&status=done&page_size=10")...)
	var list struct {
		Results []map[string]any `json:"results"`
		Next    *string          `json:"next_page_token"`
	}
	if err := json.Unmarshal(r.body, &list); err != nil || r.code != http.StatusOK {
		t.Fatalf("list: %d %s", r.code, r.body)
	}
	if len(list.Results) != 1 || list.Results[0]["result_id"] != id || list.Next == nil {
		t.Errorf("list %s", r.body)
	}
	r = runCurl(t, append(auth, base+"/v1/results?study_instance_uid=9.9.9")...)
	if r.code != http.StatusOK || !strings.Contains(string(r.body), `"results":[]`) {
		t.Errorf("list of an unknown study: %d %s", r.code, r.body)
	}
	r = runCurl(t, append(auth, base+"/v1/results?status=bogus")...)
	wantRefusal(t, r, http.StatusBadRequest, midsag.ReasonBadRequest)
	r = runCurl(t, append(auth, base+"/v1/results?page_size=ten")...)
	wantRefusal(t, r, http.StatusBadRequest, midsag.ReasonBadRequest)
	r = runCurl(t, append(auth, base+"/v1/results/nope")...)
	wantRefusal(t, r, http.StatusNotFound, midsag.ReasonNotFound)

}

// checkModelsAndOpenAPI checks GET /v1/models names the demo model as the
// default, and /openapi.json documents the gateway's paths.
func checkModelsAndOpenAPI(t *testing.T, base string, auth []string) {
	t.Helper()
	r := runCurl(t, append(auth, base+"/v1/models")...)
	var models struct {
		Models []struct {
			Name    string `json:"name"`
			Default bool   `json:"default"`
		} `json:"models"`
	}
	if err := json.Unmarshal(r.body, &models); err != nil || len(models.Models) != 1 || models.Models[0].Name != "midsag-demo" || !models.Models[0].Default {
		t.Errorf("models: %d %s", r.code, r.body)
	}

	r = runCurl(t, append(auth, base+"/openapi.json")...)
	var doc struct {
		Paths map[string]any `json:"paths"`
	}
	if err := json.Unmarshal(r.body, &doc); err != nil {
		t.Fatalf("openapi.json is not JSON: %v", err)
	}
	for _, p := range []string{"/v1/results/{result_id}", "/v1/results", "/v1/models"} {
		if _, ok := doc.Paths[p]; !ok {
			t.Errorf("openapi.json lacks path %s", p)
		}
	}

}
