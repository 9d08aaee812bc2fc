package server

import (
	"context"
	"encoding/json"
	"testing"
	"time"

	"github.com/midsag/midsag"
	"github.com/midsag/midsag/internal/ortest"
	"github.com/midsag/midsag/models"
	"github.com/midsag/midsag/models/demo"
	"github.com/midsag/midsag/phantom"
	"github.com/midsag/midsag/preprocess"
	"github.com/midsag/midsag/server/store"
)

// newCore builds a Core over a store in a temporary folder and the bundled
// demo model, and runs it until the test ends.
func newCore(t *testing.T, dir string, settle time.Duration) (*Core, *store.Store, func()) {
	t.Helper()
	ortest.Init(t)
	def, err := models.LoadBytes(demo.Name, demo.ONNX, nil, models.Options{IntraOpThreads: 1})
	if err != nil {
		t.Fatal(err)
	}
	reg, err := models.NewRegistry(def, "", models.Options{}, nil)
	if err != nil {
		t.Fatal(err)
	}
	st, err := store.Open(dir, store.Options{})
	if err != nil {
		t.Fatal(err)
	}
	c := New(Config{Store: st, Registry: reg, Pre: preprocess.New(preprocess.Options{}), Settle: settle, QueueSize: 4})
	ctx, cancel := context.WithCancel(context.Background())
	done := make(chan struct{})
	go func() { c.Run(ctx, 10*time.Second); close(done) }()
	stop := func() {
		cancel()
		<-done
		st.Close()
		reg.Close()
	}
	return c, st, stop
}

func ingestAll(t *testing.T, c *Core, files []phantom.File) []string {
	t.Helper()
	var uids []string
	for _, f := range files {
		s, err := c.Ingest(context.Background(), Origin{Listener: "test"}, f.Data)
		if err != nil {
			t.Fatalf("%s: %v", f.Name, err)
		}
		uids = append(uids, s.SOPInstanceUID)
	}
	return uids
}

// TestCoreScoresRequestAndSettledStudy checks the two paths into scoring:
// a direct request scored at once, and a study scored after the settle
// time, with a later instance giving a new result version. The phantom's
// truth (true midline slice from the slab geometry) is the reference.
func TestCoreScoresRequestAndSettledStudy(t *testing.T) {
	c, st, stop := newCore(t, t.TempDir(), 300*time.Millisecond)
	defer stop()
	opts := phantom.Options{Studies: 2, Seed: 9, Syntaxes: []string{midsag.ExplicitVRLittleEndian}}
	files, truth, err := phantom.GenerateStudy(opts, 0)
	if err != nil {
		t.Fatal(err)
	}
	uids := ingestAll(t, c, files)
	rec, res := scoreDone(t, c, uids)
	if res.ResultID != rec.ID || res.CenterSOPInstanceUID != truth.CenterSOPInstanceUID || res.Notice != midsag.Notice {
		t.Errorf("result %s centre %s, want id %s centre %s", res.ResultID, res.CenterSOPInstanceUID, rec.ID, truth.CenterSOPInstanceUID)
	}

	// The request held the whole study, so settling does not score it again.
	time.Sleep(time.Second)
	if rs, _, _ := c.Results(context.Background(), Query{StudyInstanceUID: truth.StudyInstanceUID}); len(rs) != 1 {
		t.Errorf("study 1 has %d records after settling, want 1", len(rs))
	}
	// A late instance of the same study (a resent file with new bytes)
	// makes it due again: version 2.
	late := append([]byte(nil), files[0].Data...)
	// Data Set Trailing Padding (FFFC,FFFC) OB, empty (PS3.10 7.2): new
	// bytes, same instance.
	late = append(late, 0xFC, 0xFF, 0xFC, 0xFF, 'O', 'B', 0, 0, 0, 0, 0, 0)
	if _, err := c.Ingest(context.Background(), Origin{Listener: "test"}, late); err != nil {
		t.Fatal(err)
	}
	waitFor(t, func() bool {
		rs, _, _ := c.Results(context.Background(), Query{StudyInstanceUID: truth.StudyInstanceUID, Status: StatusDone})
		return len(rs) == 2 && rs[0].Version == 2
	})
	// A second study sent instance by instance is scored once, after it settles.
	files2, truth2, _ := phantom.GenerateStudy(opts, 1)
	ingestAll(t, c, files2[:len(files2)-1])
	time.Sleep(100 * time.Millisecond)
	ingestAll(t, c, files2[len(files2)-1:])
	waitFor(t, func() bool {
		rs, _, _ := c.Results(context.Background(), Query{StudyInstanceUID: truth2.StudyInstanceUID})
		return len(rs) == 1 && rs[0].Status == StatusDone
	})
	rs, _, _ := st.ListRecords(context.Background(), Query{StudyInstanceUID: truth2.StudyInstanceUID})
	if len(rs) != 1 || rs[0].Version != 1 {
		t.Fatalf("study 2 records %+v", rs)
	}
	var r2 midsag.Result
	json.Unmarshal(rs[0].ResultJSON, &r2)
	if r2.CenterSOPInstanceUID != truth2.CenterSOPInstanceUID {
		t.Errorf("study 2 centre %s, truth %s", r2.CenterSOPInstanceUID, truth2.CenterSOPInstanceUID)
	}
}

// TestCoreRefusalsAndOverload: a refused study is stored as rejected with
// its reason; an unknown model is refused before anything is queued; with
// every queue slot taken a request is refused as overloaded and nothing is
// recorded for it.
func TestCoreRefusalsAndOverload(t *testing.T) {
	c, st, stop := newCore(t, t.TempDir(), time.Hour)
	defer stop()
	files, _, _ := phantom.GenerateStudy(phantom.Options{Studies: 1, Seed: 10, NoDecoys: true}, 0)
	uids := ingestAll(t, c, files[:2])
	rec, err := c.Score(context.Background(), ScoreRequest{SOPInstanceUIDs: uids})
	if err != nil {
		t.Fatal(err)
	}
	if rec.Status != StatusRejected || rec.Reason != string(midsag.ReasonTooFewSlices) {
		t.Errorf("two slices: %+v", rec)
	}
	if _, err := c.Score(context.Background(), ScoreRequest{SOPInstanceUIDs: uids, Model: "nope"}); err == nil {
		t.Error("unknown model accepted")
	} else if r, _ := midsag.ReasonOf(err); r != midsag.ReasonUnknownModel {
		t.Errorf("unknown model: %v", err)
	}
	if _, err := c.Ingest(context.Background(), Origin{Listener: "test"}, []byte("not dicom")); err == nil {
		t.Error("non-DICOM ingested")
	}
	// STOW-RS /studies/{study} (PS3.18 10.5): an instance of another
	// study is refused before it is stored, and still named.
	other, err := c.Ingest(context.Background(), Origin{Listener: "stow", Study: "1.2.3.999"}, files[2].Data)
	if r, _ := midsag.ReasonOf(err); r != midsag.ReasonMultipleStudies || other.SOPInstanceUID == "" {
		t.Errorf("instance of another study: %+v, %v", other, err)
	}
	if got, _ := st.InstancesBySOP(context.Background(), []string{other.SOPInstanceUID}); len(got) != 0 {
		t.Errorf("an instance of another study was stored")
	}
	before, _, _ := c.Results(context.Background(), Query{})
	for i := 0; i < cap(c.slots); i++ {
		c.slots <- struct{}{}
	}
	_, err = c.Score(context.Background(), ScoreRequest{SOPInstanceUIDs: uids})
	for i := 0; i < cap(c.slots); i++ {
		<-c.slots
	}
	if r, _ := midsag.ReasonOf(err); r != midsag.ReasonOverloaded {
		t.Errorf("full queue: %v, want overloaded", err)
	}
	if after, _, _ := c.Results(context.Background(), Query{}); len(after) != len(before) {
		t.Errorf("an overloaded request left a record (%d -> %d)", len(before), len(after))
	}
}

// TestCoreResumesAfterRestart: jobs created but not finished before a stop
// are run by the next Core over the same store.
func TestCoreResumesAfterRestart(t *testing.T) {
	dir := t.TempDir()
	files, _, _ := phantom.GenerateStudy(phantom.Options{Studies: 1, Seed: 11, NoDecoys: true}, 0)
	c, st, stop := newCore(t, dir, time.Hour)
	uids := ingestAll(t, c, files)
	stop()
	// A pending job as an interrupted run would leave it.
	st2, err := store.Open(dir, store.Options{})
	if err != nil {
		t.Fatal(err)
	}
	insts, _ := st2.InstancesBySOP(context.Background(), uids)
	rec, err := st2.CreateRecord(context.Background(), Record{StudyInstanceUID: insts[0].StudyInstanceUID, Status: StatusRunning, SOPInstanceUIDs: uids, CoveredSeq: insts[len(insts)-1].Seq})
	if err != nil {
		t.Fatal(err)
	}
	st2.Close()
	_ = st
	c2, _, stop2 := newCore(t, dir, time.Hour)
	defer stop2()
	waitFor(t, func() bool {
		r, err := c2.Result(context.Background(), rec.ID)
		return err == nil && r.Status == StatusDone
	})
}

func waitFor(t *testing.T, cond func() bool) {
	t.Helper()
	deadline := time.Now().Add(20 * time.Second)
	for time.Now().Before(deadline) {
		if cond() {
			return
		}
		time.Sleep(50 * time.Millisecond)
	}
	t.Fatal("condition not met within 20 s")
}

// scoreDone scores the instances by a direct request, which must finish
// done, and returns the record and its result.
func scoreDone(t *testing.T, c *Core, uids []string) (Record, *midsag.Result) {
	t.Helper()
	rec, err := c.Score(context.Background(), ScoreRequest{SOPInstanceUIDs: uids})
	if err != nil {
		t.Fatal(err)
	}
	if rec.Status != StatusDone {
		t.Fatalf("record %+v", rec)
	}
	var res midsag.Result
	if err := json.Unmarshal(rec.ResultJSON, &res); err != nil {
		t.Fatal(err)
	}
	return rec, &res
}
