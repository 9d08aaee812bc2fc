package server

import (
	"context"
	"encoding/json"
	"fmt"
	"math/rand/v2"
	"sort"
	"sync"
	"testing"
	"time"

	"github.com/midsag/midsag"
	"github.com/midsag/midsag/server/store"
)

// TestSettleUnderConcurrentUploads: 16 sessions upload 16 studies at once
// into a real store, each holding its study (as a STOW-RS request or a
// REST upload does) and pausing up to twice the settle time between
// instances, as a slow sender does. No study is scored before its session
// ends: each gets exactly one version covering all 12 instances (the fake
// model's raw output counts the instances it was given). A second session
// then adds 4 instances to half the studies: those get version 2 covering
// all 16, so versions rise with coverage. Without holds the pauses alone
// would make studies settle half-way.
func TestSettleUnderConcurrentUploads(t *testing.T) {
	const (
		settle  = 150 * time.Millisecond
		studies = 16
		first   = 12
		more    = 4
	)
	st, err := store.Open(t.TempDir(), store.Options{GroupCommit: 2 * time.Millisecond})
	if err != nil {
		t.Fatal(err)
	}
	defer st.Close()
	c := New(Config{Store: st, Registry: fakeRegistry{def: fakeModel{info: midsag.ModelInfo{Name: "fake", Version: "1"}}},
		Pre: fakePre{minSlices: 3}, Settle: settle, Workers: 2, QueueSize: 64})
	ctx, cancel := context.WithCancel(context.Background())
	done := make(chan struct{})
	go func() { c.Run(ctx, time.Second); close(done) }()
	defer func() { cancel(); <-done }()

	session := func(study string, from, to int, seed uint64) error {
		release := c.Hold(study)
		defer release()
		rnd := rand.New(rand.NewPCG(seed, 1))
		for i := from; i < to; i++ {
			if _, err := c.Ingest(context.Background(), Origin{Listener: "test"}, fakeInstance(study, study+".1", fmt.Sprintf("%s.1.%d", study, i))); err != nil {
				return err
			}
			if rnd.IntN(3) == 0 {
				time.Sleep(time.Duration(rnd.Int64N(int64(2 * settle))))
			}
		}
		return nil
	}
	run := func(n, from, to int) {
		var wg sync.WaitGroup
		errs := make(chan error, n)
		for s := range n {
			wg.Go(func() { errs <- session(fmt.Sprintf("9.%d", s), from, to, uint64(s)) })
		}
		wg.Wait()
		close(errs)
		for err := range errs {
			if err != nil {
				t.Fatal(err)
			}
		}
	}
	run(studies, 0, first)
	for s := range studies {
		waitForResult(t, c, fmt.Sprintf("9.%d", s), 1)
	}
	run(studies/2, first, first+more)
	for s := range studies / 2 {
		waitForResult(t, c, fmt.Sprintf("9.%d", s), 2)
	}
	time.Sleep(3 * settle)
	for s := range studies {
		study := fmt.Sprintf("9.%d", s)
		recs, _, err := c.Results(context.Background(), Query{StudyInstanceUID: study})
		if err != nil {
			t.Fatal(err)
		}
		sort.Slice(recs, func(i, j int) bool { return recs[i].Version < recs[j].Version })
		var counts []float64
		for _, r := range recs {
			var res midsag.Result
			if r.Status != StatusDone || json.Unmarshal(r.ResultJSON, &res) != nil {
				t.Errorf("study %s version %d: %s %s", study, r.Version, r.Status, r.Message)
				continue
			}
			counts = append(counts, res.RawOutput)
		}
		want := []float64{first}
		if s < studies/2 {
			want = []float64{first, first + more}
		}
		if fmt.Sprint(counts) != fmt.Sprint(want) {
			t.Errorf("study %s: versions cover %v instances, want %v", study, counts, want)
		}
		for i := 1; i < len(recs); i++ {
			if recs[i].CoveredSeq < recs[i-1].CoveredSeq {
				t.Errorf("study %s: version %d covers up to seq %d, below version %d's %d", study, recs[i].Version, recs[i].CoveredSeq, recs[i-1].Version, recs[i-1].CoveredSeq)
			}
		}
	}
}
