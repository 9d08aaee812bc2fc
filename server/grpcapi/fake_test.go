package grpcapi

import (
	"archive/zip"
	"bytes"
	"context"
	"encoding/json"
	"fmt"
	"io"
	"mime/multipart"
	"net/textproto"
	"os"
	"sync"
	"testing"
	"time"

	"github.com/midsag/midsag"
	"github.com/midsag/midsag/phantom"
	"github.com/midsag/midsag/preprocess"
	"github.com/midsag/midsag/server"
	"github.com/midsag/midsag/server/store"
)

// fakeBackend records calls and answers with canned records; the real
// core is tested on its own.
type fakeBackend struct {
	pre *preprocess.Preprocessor

	mu       sync.Mutex
	ingested []server.Stored
	origins  []server.Origin
	scores   []server.ScoreRequest
	records  map[string]server.Record
	// scoreErr, when set, is what Score returns.
	scoreErr error
	// staged are instances received, not yet committed, with their origin.
	staged map[*server.Staged]server.Origin
}

func newFake() *fakeBackend {
	return &fakeBackend{pre: preprocess.New(preprocess.Options{}), records: map[string]server.Record{}}
}

func (f *fakeBackend) Ingest(ctx context.Context, origin server.Origin, data []byte) (server.Stored, error) {
	return f.IngestFrom(ctx, origin, bytes.NewReader(data), 0)
}

func (f *fakeBackend) IngestFrom(ctx context.Context, origin server.Origin, r io.Reader, limit int64) (server.Stored, error) {
	st, err := f.Receive(ctx, origin, r, limit)
	if err != nil {
		if st != nil {
			return st.Stored, err
		}
		return server.Stored{}, err
	}
	return f.Commit(ctx, st)
}

// Receive reads the instance whole and parses it; the staged instance
// remembers its origin for Commit.
func (f *fakeBackend) Receive(_ context.Context, origin server.Origin, r io.Reader, limit int64) (*server.Staged, error) {
	if limit <= 0 {
		limit = 1 << 40
	}
	data, err := io.ReadAll(io.LimitReader(r, limit+1))
	if err != nil {
		return nil, err
	}
	if int64(len(data)) > limit {
		return nil, midsag.Rejectf(midsag.ReasonTooLarge, "an instance is larger than the %d-byte limit", limit)
	}
	inst, err := f.pre.Read("upload", bytes.NewReader(data))
	if err != nil {
		return nil, err
	}
	st := &server.Staged{Stored: server.Stored{
		StudyInstanceUID:  inst.StudyInstanceUID,
		SeriesInstanceUID: inst.SeriesInstanceUID,
		SOPInstanceUID:    inst.SOPInstanceUID,
		SOPClassUID:       inst.SOPClassUID,
	}}
	if origin.Study != "" && st.StudyInstanceUID != origin.Study {
		return st, midsag.Rejectf(midsag.ReasonMultipleStudies, "instance of another study")
	}
	f.mu.Lock()
	defer f.mu.Unlock()
	if f.staged == nil {
		f.staged = map[*server.Staged]server.Origin{}
	}
	f.staged[st] = origin
	return st, nil
}

func (f *fakeBackend) Commit(_ context.Context, st *server.Staged) (server.Stored, error) {
	f.mu.Lock()
	defer f.mu.Unlock()
	origin, ok := f.staged[st]
	if !ok {
		return server.Stored{}, fmt.Errorf("commit of an instance not staged")
	}
	delete(f.staged, st)
	f.ingested = append(f.ingested, st.Stored)
	f.origins = append(f.origins, origin)
	return st.Stored, nil
}

// Hold holds nothing: the fake has no scheduler.
func (f *fakeBackend) Hold(string) func() { return func() {} }

// NewUpload returns a temporary file.
func (f *fakeBackend) NewUpload() (server.Upload, error) {
	file, err := os.CreateTemp("", "fake-upload-*")
	if err != nil {
		return nil, err
	}
	return &fileUpload{File: file}, nil
}

// fileUpload is a temporary file as a server.Upload.
type fileUpload struct {
	*os.File
	n int64
}

func (u *fileUpload) Write(p []byte) (int, error) {
	n, err := u.File.Write(p)
	u.n += int64(n)
	return n, err
}
func (u *fileUpload) Size() int64 { return u.n }
func (u *fileUpload) Park() error { return nil }
func (u *fileUpload) Abort()      { u.File.Close(); os.Remove(u.Name()) }

func (f *fakeBackend) Score(_ context.Context, req server.ScoreRequest) (server.Record, error) {
	f.mu.Lock()
	defer f.mu.Unlock()
	f.scores = append(f.scores, req)
	if f.scoreErr != nil {
		return server.Record{}, f.scoreErr
	}
	study := ""
	for _, st := range f.ingested {
		if st.SOPInstanceUID == req.SOPInstanceUIDs[0] {
			study = st.StudyInstanceUID
		}
	}
	id := fmt.Sprintf("r%d", len(f.records)+1)
	rec := server.Record{ID: id, StudyInstanceUID: study, Version: 1, Status: server.StatusPending,
		ModelName: req.Model, Explain: req.Explain, CreatedAt: time.Date(2025, 3, 4, 5, 6, 7, 0, time.UTC)}
	if !req.Async {
		rec.Status = server.StatusDone
		rec.FinishedAt = rec.CreatedAt.Add(2 * time.Second)
		res := sampleResult()
		res.ResultID, res.StudyInstanceUID = id, study
		b, err := json.Marshal(res)
		if err != nil {
			return server.Record{}, err
		}
		rec.ResultJSON = b
	}
	f.records[id] = rec
	return rec, nil
}

// fakePNG stands in for an explained result's heatmap.
var fakePNG = []byte("\x89PNG\r\n\x1a\nfake")

// Artifact returns fakePNG for an explained record's heatmap.
func (f *fakeBackend) Artifact(_ context.Context, id, name string) ([]byte, error) {
	f.mu.Lock()
	defer f.mu.Unlock()
	if rec, ok := f.records[id]; ok && rec.Explain && name == server.HeatmapPNG {
		return fakePNG, nil
	}
	return nil, fmt.Errorf("artifact %s of %s: %w", name, id, store.ErrNotFound)
}

func (f *fakeBackend) Result(_ context.Context, id string) (server.Record, error) {
	f.mu.Lock()
	defer f.mu.Unlock()
	rec, ok := f.records[id]
	if !ok {
		return server.Record{}, fmt.Errorf("result %s: %w", id, store.ErrNotFound)
	}
	return rec, nil
}

func (f *fakeBackend) Results(_ context.Context, q server.Query) ([]server.Record, string, error) {
	f.mu.Lock()
	defer f.mu.Unlock()
	var out []server.Record
	for _, rec := range f.records {
		if (q.StudyInstanceUID == "" || rec.StudyInstanceUID == q.StudyInstanceUID) && (q.Status == "" || rec.Status == q.Status) {
			out = append(out, rec)
		}
	}
	return out, "", nil
}

func (f *fakeBackend) Models(context.Context) []server.ModelEntry {
	return []server.ModelEntry{{Name: "midsag-demo", Version: "1", SHA256: "ab12", Default: true, Labels: []string{"no_compression", "compression"}}}
}

// setScoreErr makes Score return err from now on.
func (f *fakeBackend) setScoreErr(err error) {
	f.mu.Lock()
	defer f.mu.Unlock()
	f.scoreErr = err
}

// calls returns copies of what was recorded; the server's goroutines
// write it, and curl's replies give the race detector no ordering.
func (f *fakeBackend) calls() (ingested []server.Stored, origins []server.Origin, scores []server.ScoreRequest) {
	f.mu.Lock()
	defer f.mu.Unlock()
	return append([]server.Stored(nil), f.ingested...), append([]server.Origin(nil), f.origins...), append([]server.ScoreRequest(nil), f.scores...)
}

func (f *fakeBackend) counts() (ingested, scores int) {
	f.mu.Lock()
	defer f.mu.Unlock()
	return len(f.ingested), len(f.scores)
}

// sampleResult is a midsag.Result with every field set to a value that is
// not its zero, so a field lost on the way shows.
func sampleResult() midsag.Result {
	return midsag.Result{
		ResultID:             "r-sample",
		CreatedAt:            time.Date(2025, 3, 4, 5, 6, 7, 123456789, time.UTC),
		StudyInstanceUID:     "1.2.3",
		SeriesInstanceUID:    "1.2.3.4",
		CenterSOPInstanceUID: "1.2.3.4.5",
		Slices: []midsag.SliceScore{{SOPInstanceUID: "1.2.3.4.5", InstanceNumber: 7, PositionMM: -1.5,
			MidlineScore: 0.93, Parts: map[string]float64{"symmetry": 0.9, "prior": 0.03}, InStack: true}},
		SeriesCandidates: []midsag.SeriesCandidate{{SeriesInstanceUID: "1.2.3.4", SeriesNumber: 3, Description: "T2 SAG",
			Instances: 15, Score: 8.5, Picked: true, Reasons: []string{"sagittal", "T2 weighted"}}},
		Model:             midsag.ModelInfo{Name: "midsag-demo", Version: "1", SHA256: "ab12"},
		RawOutput:         1.25,
		Probability:       0.777,
		CalibratedProb:    0.71,
		CalibrationMethod: "temperature",
		Threshold:         0.5,
		Decision:          "compression",
		QualityFlags:      []string{"few_slices"},
		Notice:            midsag.Notice,
		TimingsMS:         map[string]float64{"read": 12.5, "predict": 40},
	}
}

// phantomStudy returns one synthetic study's DICOM files.
func phantomStudy(t *testing.T) []phantom.File {
	t.Helper()
	files, _, err := phantom.GenerateStudy(phantom.Options{Studies: 1, Seed: 1, NoDecoys: true}, 0)
	if err != nil {
		t.Fatal(err)
	}
	return files
}

func zipOf(t *testing.T, files []phantom.File) []byte {
	t.Helper()
	var buf bytes.Buffer
	zw := zip.NewWriter(&buf)
	for _, f := range files {
		w, err := zw.Create(f.Name)
		if err != nil {
			t.Fatal(err)
		}
		if _, err := w.Write(f.Data); err != nil {
			t.Fatal(err)
		}
	}
	if err := zw.Close(); err != nil {
		t.Fatal(err)
	}
	return buf.Bytes()
}

// relatedBody builds a multipart/related body (RFC 2387) of the given
// parts with their Content-Types and returns it with its boundary.
func relatedBody(t *testing.T, parts [][]byte, types []string) ([]byte, string) {
	t.Helper()
	var buf bytes.Buffer
	mw := multipart.NewWriter(&buf)
	for i, p := range parts {
		w, err := mw.CreatePart(textproto.MIMEHeader{"Content-Type": {types[i]}})
		if err != nil {
			t.Fatal(err)
		}
		if _, err := w.Write(p); err != nil {
			t.Fatal(err)
		}
	}
	if err := mw.Close(); err != nil {
		t.Fatal(err)
	}
	return buf.Bytes(), mw.Boundary()
}

func scoresOf(f *fakeBackend) []server.ScoreRequest { _, _, s := f.calls(); return s }
func ingestedOf(f *fakeBackend) []server.Stored     { s, _, _ := f.calls(); return s }
func originsOf(f *fakeBackend) []server.Origin      { _, o, _ := f.calls(); return o }
