package server

import (
	"bytes"
	"context"
	"encoding/json"
	"fmt"
	"io"
	"slices"
	"strings"
	"sync"
	"testing"
	"time"

	"github.com/midsag/midsag"
	"github.com/midsag/midsag/models"
	"github.com/midsag/midsag/server/store"
)

// The fakes below stand in for SQLite, DICOM parsing and ONNX Runtime, so
// Core's own logic (ingest, settle scheduling, jobs, refusals) is tested
// alone. What they must do follows the contracts of Store, Registry and
// Preprocessor in core.go and of Backend in types.go.

// fakeInstance is the fakes' stand-in for a DICOM instance: a line
// "study series sop".
func fakeInstance(study, series, sop string) []byte {
	return []byte(study + " " + series + " " + sop)
}

// fakePre reads fakeInstance bytes; Prepare refuses fewer than minSlices
// instances as too_few_slices and otherwise stacks one value per
// instance.
type fakePre struct{ minSlices int }

func (p fakePre) ReadHeader(name string, r io.Reader, _ int64) (*midsag.Instance, error) {
	return p.Read(name, r)
}

func (fakePre) Read(name string, r io.Reader) (*midsag.Instance, error) {
	b, err := io.ReadAll(r)
	if err != nil {
		return nil, err
	}
	f := strings.Fields(string(b))
	if len(f) != 3 {
		return nil, midsag.Rejectf(midsag.ReasonNotDICOM, "%s is not a fake instance", name)
	}
	return &midsag.Instance{StudyInstanceUID: f[0], SeriesInstanceUID: f[1], SOPInstanceUID: f[2], SOPClassUID: midsag.MRImageStorage}, nil
}

func (p fakePre) Prepare(_ context.Context, insts []*midsag.Instance, _ midsag.InputSpec) (*midsag.Prepared, error) {
	if len(insts) < p.minSlices {
		return nil, midsag.Rejectf(midsag.ReasonTooFewSlices, "%d instances, need %d", len(insts), p.minSlices)
	}
	sops := make([]string, len(insts))
	for i, in := range insts {
		sops[i] = in.SOPInstanceUID
	}
	slices.Sort(sops)
	return &midsag.Prepared{
		StudyInstanceUID:     insts[0].StudyInstanceUID,
		SeriesInstanceUID:    insts[0].SeriesInstanceUID,
		CenterSOPInstanceUID: sops[len(sops)/2],
		Input:                &midsag.Tensor{Shape: []int64{1, int64(len(insts))}, Data: make([]float32, len(insts))},
		TimingsMS:            map[string]float64{},
	}, nil
}

// fakeModel's raw output is the number of stacked values, so a result
// shows how many instances it covered.
type fakeModel struct{ info midsag.ModelInfo }

func (m fakeModel) Info() midsag.ModelInfo    { return m.info }
func (fakeModel) InputSpec() midsag.InputSpec { return midsag.InputSpec{Slices: 1} }
func (fakeModel) Interpret(raw float64) midsag.Score {
	return midsag.Score{RawOutput: raw, Probability: raw / 100, Calibrated: raw / 100, Method: "identity", Threshold: 0.5, Decision: "negative"}
}
func (fakeModel) Predict(_ context.Context, in *midsag.Tensor) ([]float64, error) {
	return []float64{float64(len(in.Data))}, nil
}

// fakeRegistry serves one default model.
type fakeRegistry struct{ def fakeModel }

func (r fakeRegistry) Acquire(name, version string) (midsag.Model, func(), error) {
	if name != "" && name != r.def.info.Name {
		return nil, nil, midsag.Rejectf(midsag.ReasonUnknownModel, "no model named %q", name)
	}
	return r.def, func() {}, nil
}

func (r fakeRegistry) List() []models.RegistryEntry {
	return []models.RegistryEntry{{Info: r.def.info, Default: true}}
}

// fakeStore keeps instances, records and artifacts in memory.
type fakeStore struct {
	mu        sync.Mutex
	seq       int64
	insts     []store.Instance
	data      map[string][]byte
	received  map[string]time.Time
	records   map[string]Record
	order     []string
	artifacts map[string][]byte
}

func newFakeStore() *fakeStore {
	return &fakeStore{data: map[string][]byte{}, received: map[string]time.Time{}, records: map[string]Record{}, artifacts: map[string][]byte{}}
}

// memUpload is the fake store's store.Upload, in memory.
type memUpload struct {
	bytes.Buffer
	aborted bool
}

func (u *memUpload) ReadAt(p []byte, off int64) (int, error) {
	return bytes.NewReader(u.Bytes()).ReadAt(p, off)
}
func (u *memUpload) Size() int64 { return int64(u.Len()) }
func (u *memUpload) Park() error { return nil }
func (u *memUpload) Abort()      { u.aborted = true }

func (s *fakeStore) NewUpload() (store.Upload, error) { return &memUpload{}, nil }

func (s *fakeStore) PutUpload(_ context.Context, in store.Instance, up store.Upload) (store.Instance, bool, error) {
	data := up.(*memUpload).Bytes()
	s.mu.Lock()
	defer s.mu.Unlock()
	for _, old := range s.insts {
		if old.SOPInstanceUID == in.SOPInstanceUID && bytes.Equal(s.data[old.SOPInstanceUID], data) {
			return old, true, nil
		}
	}
	s.seq++
	in.Seq, in.Size, in.ReceivedAt = s.seq, int64(len(data)), time.Now()
	s.insts = append(s.insts, in)
	s.data[in.SOPInstanceUID] = append([]byte(nil), data...)
	s.received[in.StudyInstanceUID] = in.ReceivedAt
	return in, false, nil
}

func (s *fakeStore) Open(in store.Instance) (io.ReadCloser, error) {
	s.mu.Lock()
	defer s.mu.Unlock()
	return io.NopCloser(bytes.NewReader(s.data[in.SOPInstanceUID])), nil
}

func (s *fakeStore) Instances(_ context.Context, study string, maxSeq int64) ([]store.Instance, error) {
	s.mu.Lock()
	defer s.mu.Unlock()
	var out []store.Instance
	for _, in := range s.insts {
		if in.StudyInstanceUID == study && (maxSeq <= 0 || in.Seq <= maxSeq) {
			out = append(out, in)
		}
	}
	return out, nil
}

func (s *fakeStore) InstancesBySOP(_ context.Context, sops []string) ([]store.Instance, error) {
	s.mu.Lock()
	defer s.mu.Unlock()
	var out []store.Instance
	for _, in := range s.insts {
		if slices.Contains(sops, in.SOPInstanceUID) {
			out = append(out, in)
		}
	}
	return out, nil
}

// DueStudies follows store.Store.DueStudies: quiet studies whose newest
// instance no whole-study record covers.
func (s *fakeStore) DueStudies(_ context.Context, quietSince time.Time) ([]store.StudyState, error) {
	s.mu.Lock()
	defer s.mu.Unlock()
	last := map[string]int64{}
	for _, in := range s.insts {
		last[in.StudyInstanceUID] = max(last[in.StudyInstanceUID], in.Seq)
	}
	var out []store.StudyState
	for study, seq := range last {
		if s.received[study].After(quietSince) {
			continue
		}
		var covered int64
		for _, r := range s.records {
			if r.StudyInstanceUID == study && len(r.SOPInstanceUIDs) == 0 {
				covered = max(covered, r.CoveredSeq)
			}
		}
		if seq > covered {
			out = append(out, store.StudyState{StudyInstanceUID: study, LastSeq: seq, LastReceived: s.received[study], ScoredSeq: covered})
		}
	}
	return out, nil
}

func (s *fakeStore) CreateRecord(_ context.Context, r Record) (Record, error) {
	s.mu.Lock()
	defer s.mu.Unlock()
	for _, old := range s.records {
		if old.StudyInstanceUID == r.StudyInstanceUID {
			r.Version = max(r.Version, old.Version)
		}
	}
	r.Version++
	r.ID = fmt.Sprintf("rec%d", len(s.order)+1)
	r.CreatedAt = time.Now().UTC()
	s.records[r.ID] = r
	s.order = append(s.order, r.ID)
	return r, nil
}

func (s *fakeStore) UpdateRecord(_ context.Context, r Record) error {
	s.mu.Lock()
	defer s.mu.Unlock()
	if _, ok := s.records[r.ID]; !ok {
		return store.ErrNotFound
	}
	s.records[r.ID] = r
	return nil
}

func (s *fakeStore) Record(_ context.Context, id string) (Record, error) {
	s.mu.Lock()
	defer s.mu.Unlock()
	r, ok := s.records[id]
	if !ok {
		return Record{}, store.ErrNotFound
	}
	return r, nil
}

// ListRecords returns every match, newest first, in one page.
func (s *fakeStore) ListRecords(_ context.Context, q Query) ([]Record, string, error) {
	s.mu.Lock()
	defer s.mu.Unlock()
	var out []Record
	for i := len(s.order) - 1; i >= 0; i-- {
		r := s.records[s.order[i]]
		if (q.StudyInstanceUID == "" || r.StudyInstanceUID == q.StudyInstanceUID) && (q.Status == "" || r.Status == q.Status) {
			out = append(out, r)
		}
	}
	return out, "", nil
}

func (s *fakeStore) Unfinished(context.Context) ([]Record, error) { return nil, nil }

func (s *fakeStore) WriteArtifact(id, name string, data []byte) error {
	s.mu.Lock()
	defer s.mu.Unlock()
	s.artifacts[id+"/"+name] = data
	return nil
}

func (s *fakeStore) ReadArtifact(id, name string) ([]byte, error) {
	s.mu.Lock()
	defer s.mu.Unlock()
	b, ok := s.artifacts[id+"/"+name]
	if !ok {
		return nil, store.ErrNotFound
	}
	return b, nil
}

// runFakeCore runs a Core over the fakes until the test ends.
func runFakeCore(t *testing.T, settle time.Duration) (*Core, *fakeStore) {
	t.Helper()
	st := newFakeStore()
	c := New(Config{Store: st, Registry: fakeRegistry{def: fakeModel{info: midsag.ModelInfo{Name: "fake", Version: "1"}}},
		Pre: fakePre{minSlices: 3}, Settle: settle, Workers: 2, QueueSize: 4})
	ctx, cancel := context.WithCancel(context.Background())
	done := make(chan struct{})
	go func() { c.Run(ctx, time.Second); close(done) }()
	t.Cleanup(func() { cancel(); <-done })
	return c, st
}

// TestCoreWithFakesSettlesAndScores: instances ingested one by one are
// scored once, as one whole-study job, after the study has been quiet
// for the settle time; the result covers every instance sent (the fake
// model's raw output counts them) and carries the record's id and the
// notice. A later instance makes the study due again (version 2, all four
// instances), as the Backend contract says.
func TestCoreWithFakesSettlesAndScores(t *testing.T) {
	c, st := runFakeCore(t, 50*time.Millisecond)
	ctx := context.Background()
	for i := range 3 {
		if _, err := c.Ingest(ctx, Origin{Listener: "test"}, fakeInstance("1.2.3", "1.2.3.1", fmt.Sprintf("1.2.3.1.%d", i+1))); err != nil {
			t.Fatal(err)
		}
	}
	res := waitForResult(t, c, "1.2.3", 1)
	if res.RawOutput != 3 || res.CenterSOPInstanceUID != "1.2.3.1.2" || res.Notice != midsag.Notice || res.Model.Name != "fake" {
		t.Errorf("version 1: raw %v (want 3 instances), centre %s, model %s", res.RawOutput, res.CenterSOPInstanceUID, res.Model.Name)
	}
	if _, err := c.Ingest(ctx, Origin{Listener: "test"}, fakeInstance("1.2.3", "1.2.3.1", "1.2.3.1.4")); err != nil {
		t.Fatal(err)
	}
	if res := waitForResult(t, c, "1.2.3", 2); res.RawOutput != 4 {
		t.Errorf("version 2 covers %v instances, want 4", res.RawOutput)
	}
	recs, _, _ := st.ListRecords(ctx, Query{StudyInstanceUID: "1.2.3"})
	if len(recs) != 2 {
		t.Errorf("%d records, want 2 (one per settle)", len(recs))
	}
}

// TestCoreWithFakesRefusals: an instance without UIDs is refused at
// ingest as not_dicom; a request too small for the preprocessor is
// recorded as rejected with its reason (too_few_slices) and no result;
// an unknown model and an empty request are refused before a record
// exists (reason codes of DESIGN.md and reason.go).
func TestCoreWithFakesRefusals(t *testing.T) {
	c, st := runFakeCore(t, time.Hour)
	ctx := context.Background()
	if _, err := c.Ingest(ctx, Origin{Listener: "test"}, []byte("garbage")); !hasReason(err, midsag.ReasonNotDICOM) {
		t.Errorf("garbage ingested: %v", err)
	}
	var sops []string
	for i := range 2 {
		s, err := c.Ingest(ctx, Origin{Listener: "test"}, fakeInstance("4.5", "4.5.1", fmt.Sprintf("4.5.1.%d", i+1)))
		if err != nil {
			t.Fatal(err)
		}
		sops = append(sops, s.SOPInstanceUID)
	}
	rec, err := c.Score(ctx, ScoreRequest{SOPInstanceUIDs: sops})
	if err != nil {
		t.Fatal(err)
	}
	if rec.Status != StatusRejected || rec.Reason != string(midsag.ReasonTooFewSlices) || rec.ResultJSON != nil {
		t.Errorf("two instances: status %s reason %q, want rejected too_few_slices without a result", rec.Status, rec.Reason)
	}
	if _, err := c.Score(ctx, ScoreRequest{SOPInstanceUIDs: sops, Model: "other"}); !hasReason(err, midsag.ReasonUnknownModel) {
		t.Errorf("unknown model: %v", err)
	}
	if _, err := c.Score(ctx, ScoreRequest{}); !hasReason(err, midsag.ReasonNoInput) {
		t.Errorf("empty request: %v", err)
	}
	if recs, _, _ := st.ListRecords(ctx, Query{}); len(recs) != 1 {
		t.Errorf("%d records, want only the rejected one", len(recs))
	}
}

func hasReason(err error, want midsag.Reason) bool {
	r, ok := midsag.ReasonOf(err)
	return ok && r == want
}

// waitForResult waits for the study's done record of the given version
// and returns its result; on timeout it fails with every record's status
// and reason.
func waitForResult(t *testing.T, c *Core, study string, version int) midsag.Result {
	t.Helper()
	deadline := time.Now().Add(10 * time.Second)
	var recs []Record
	for time.Now().Before(deadline) {
		recs, _, _ = c.Results(context.Background(), Query{StudyInstanceUID: study})
		for _, r := range recs {
			if r.Version == version && r.Status == StatusDone {
				var res midsag.Result
				if err := json.Unmarshal(r.ResultJSON, &res); err != nil {
					t.Fatal(err)
				}
				if res.ResultID != r.ID {
					t.Errorf("result id %s in record %s", res.ResultID, r.ID)
				}
				return res
			}
		}
		time.Sleep(20 * time.Millisecond)
	}
	for _, r := range recs {
		t.Logf("record %s v%d: %s %s %s", r.ID, r.Version, r.Status, r.Reason, r.Message)
	}
	t.Fatalf("no done version %d of study %s within 10 s", version, study)
	return midsag.Result{}
}
