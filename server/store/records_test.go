package store

import (
	"context"
	"errors"
	"fmt"
	"slices"
	"sync"
	"testing"
	"time"
)

func TestDueStudies(t *testing.T) {
	s := openT(t, t.TempDir(), Options{})
	ctx := context.Background()
	a1, _, err := s.Put(ctx, inst("1.1", "1.1.1"), []byte("a1"))
	if err != nil {
		t.Fatal(err)
	}
	b1, _, err := s.Put(ctx, inst("1.2", "1.2.1"), []byte("b1"))
	if err != nil {
		t.Fatal(err)
	}
	due := func(quiet time.Time) map[string]StudyState {
		t.Helper()
		list, err := s.DueStudies(ctx, quiet)
		if err != nil {
			t.Fatal(err)
		}
		m := map[string]StudyState{}
		for _, st := range list {
			m[st.StudyInstanceUID] = st
		}
		return m
	}

	// Quiet time: a study whose newest instance arrived after quietSince is
	// still receiving; "at or before" includes the exact instant.
	if got := due(a1.ReceivedAt.Add(-time.Nanosecond)); len(got) != 0 {
		t.Fatalf("due before the quiet time: %v", got)
	}
	got := due(a1.ReceivedAt)
	if _, ok := got["1.1"]; !ok {
		t.Fatalf("study 1.1 not due at its arrival instant: %v", got)
	}
	got = due(b1.ReceivedAt)
	if st := got["1.1"]; st.LastSeq != a1.Seq || st.ScoredSeq != 0 || !st.LastReceived.Equal(a1.ReceivedAt) {
		t.Fatalf("state of 1.1 = %+v", st)
	}

	// A finished whole-study record covers 1.1; a request-scoped record for
	// 1.2 does not cover 1.2.
	if _, err := s.CreateRecord(ctx, Record{StudyInstanceUID: "1.1", Status: StatusDone, CoveredSeq: a1.Seq}); err != nil {
		t.Fatal(err)
	}
	if _, err := s.CreateRecord(ctx, Record{StudyInstanceUID: "1.2", SOPInstanceUIDs: []string{"1.2.1"}, CoveredSeq: b1.Seq}); err != nil {
		t.Fatal(err)
	}
	got = due(time.Now())
	if _, ok := got["1.1"]; ok {
		t.Fatalf("covered study still due: %v", got)
	}
	if _, ok := got["1.2"]; !ok {
		t.Fatalf("request-scoped record hid study 1.2: %v", got)
	}

	// A newer instance makes 1.1 due again, once quiet.
	a2, _, err := s.Put(ctx, inst("1.1", "1.1.2"), []byte("a2"))
	if err != nil {
		t.Fatal(err)
	}
	if _, ok := due(a1.ReceivedAt)["1.1"]; ok {
		t.Fatal("1.1 due although its newest instance is newer than quietSince")
	}
	st, ok := due(a2.ReceivedAt)["1.1"]
	if !ok || st.LastSeq != a2.Seq || st.ScoredSeq != a1.Seq {
		t.Fatalf("after a new instance: %+v, due=%v", st, ok)
	}

	// A pending whole-study job covers it too: it will run, so the
	// scheduler must not queue a second one.
	if _, err := s.CreateRecord(ctx, Record{StudyInstanceUID: "1.1", CoveredSeq: a2.Seq}); err != nil {
		t.Fatal(err)
	}
	if _, ok := due(time.Now())["1.1"]; ok {
		t.Fatal("study with a pending whole-study job is due")
	}
}

func TestRecordRoundTrip(t *testing.T) {
	s := openT(t, t.TempDir(), Options{})
	ctx := context.Background()
	r, err := s.CreateRecord(ctx, Record{
		StudyInstanceUID: "1.9", ModelName: "m", ModelVersion: "1", Explain: true,
		SOPInstanceUIDs: []string{"1.9.1", "1.9.2"}, CoveredSeq: 7,
	})
	if err != nil {
		t.Fatal(err)
	}
	if len(r.ID) != 32 || r.Version != 1 || r.Status != StatusPending || r.CreatedAt.Location() != time.UTC {
		t.Fatalf("created %+v", r)
	}
	r.Status, r.ResultJSON, r.FinishedAt = StatusDone, []byte(`{"probability":0.5}`), time.Now()
	if err := s.UpdateRecord(ctx, r); err != nil {
		t.Fatal(err)
	}
	got, err := s.Record(ctx, r.ID)
	if err != nil {
		t.Fatal(err)
	}
	if got.Status != StatusDone || string(got.ResultJSON) != `{"probability":0.5}` || !got.Explain ||
		!slices.Equal(got.SOPInstanceUIDs, r.SOPInstanceUIDs) || got.CoveredSeq != 7 ||
		!got.CreatedAt.Equal(r.CreatedAt) || !got.FinishedAt.Equal(r.FinishedAt) || got.FinishedAt.Location() != time.UTC {
		t.Fatalf("read back %+v\nwant %+v", got, r)
	}
	if _, err := s.Record(ctx, "nope"); !errors.Is(err, ErrNotFound) {
		t.Fatalf("Record(unknown) = %v", err)
	}
	if err := s.UpdateRecord(ctx, Record{ID: "nope", Status: StatusDone}); !errors.Is(err, ErrNotFound) {
		t.Fatalf("UpdateRecord(unknown) = %v", err)
	}
	if _, err := s.CreateRecord(ctx, Record{StudyInstanceUID: "1.9", Status: "bogus"}); err == nil {
		t.Fatal("unknown status accepted")
	}
}

// TestRecordVersionsConcurrent: versions of a study count 1..n with no gap
// and no repeat when records are created from 8 goroutines at once.
func TestRecordVersionsConcurrent(t *testing.T) {
	s := openT(t, t.TempDir(), Options{})
	ctx := context.Background()
	var mu sync.Mutex
	versions := map[string][]int{}
	var wg sync.WaitGroup
	for g := range 8 {
		wg.Go(func() {
			for i := range 10 {
				study := fmt.Sprint("1.", (g+i)%2)
				r, err := s.CreateRecord(ctx, Record{StudyInstanceUID: study})
				if err != nil {
					t.Error(err)
					return
				}
				mu.Lock()
				versions[study] = append(versions[study], r.Version)
				mu.Unlock()
			}
		})
	}
	wg.Wait()
	for study, vs := range versions {
		slices.Sort(vs)
		for i, v := range vs {
			if v != i+1 {
				t.Fatalf("study %s versions %v", study, vs)
			}
		}
	}
	if len(versions["1.0"])+len(versions["1.1"]) != 80 {
		t.Fatalf("versions %v", versions)
	}
}

// TestListRecordsPagingAndFilters creates 123 records over three studies
// and four statuses (record i: study 2.(i%3), status i%4), then checks
// that every page size lists each record once, newest first, in full
// pages; that filters return exactly the matching records; that a bad
// token is refused; and that Unfinished and Stats count by status.
func TestListRecordsPagingAndFilters(t *testing.T) {
	s := openT(t, t.TempDir(), Options{})
	ctx := context.Background()
	statuses := []string{StatusPending, StatusRunning, StatusDone, StatusFailed}
	created := map[string]Record{}
	for i := range 123 {
		r, err := s.CreateRecord(ctx, Record{StudyInstanceUID: fmt.Sprint("2.", i%3), Status: statuses[i%4]})
		if err != nil {
			t.Fatal(err)
		}
		created[r.ID] = r
	}
	for _, size := range []int{0, 1, 10, 41, 123, 500} {
		checkListsAll(t, listAll(t, s, Query{PageSize: size}), created)
	}
	for _, q := range []Query{{StudyInstanceUID: "2.1", PageSize: 7}, {Status: StatusDone, PageSize: 7},
		{StudyInstanceUID: "2.2", Status: StatusFailed, PageSize: 3}} {
		checkFiltered(t, q, listAll(t, s, q), created)
	}
	if _, _, err := s.ListRecords(ctx, Query{PageToken: "!!"}); err == nil {
		t.Fatal("bad page token accepted")
	}
	checkUnfinished(t, s)
	st, err := s.Stats(ctx)
	if err != nil {
		t.Fatal(err)
	}
	if st.Records[StatusDone] != 31 || st.Records[StatusPending] != 31 || st.Records[StatusFailed] != 30 {
		t.Fatalf("Stats.Records = %v", st.Records)
	}
}

// listAll pages through ListRecords with q, checking that every page but
// the last is full and none is larger than the page size (default 50).
func listAll(t *testing.T, s *Store, q Query) []Record {
	t.Helper()
	size := q.PageSize
	if size == 0 {
		size = 50
	}
	var all []Record
	for pages := 0; pages <= 200; pages++ {
		page, next, err := s.ListRecords(context.Background(), q)
		if err != nil {
			t.Fatal(err)
		}
		if len(page) > size || (next != "" && len(page) != size) {
			t.Fatalf("page of %d with size %d, next=%q", len(page), q.PageSize, next)
		}
		all = append(all, page...)
		if next == "" {
			return all
		}
		q.PageToken = next
	}
	t.Fatal("paging does not end")
	return nil
}

// checkListsAll checks that all holds every created record once, newest
// first.
func checkListsAll(t *testing.T, all []Record, created map[string]Record) {
	t.Helper()
	seen := map[string]bool{}
	for i, r := range all {
		if seen[r.ID] || created[r.ID].ID == "" {
			t.Fatalf("%s repeated or unknown", r.ID)
		}
		seen[r.ID] = true
		if i > 0 && all[i-1].CreatedAt.Before(r.CreatedAt) {
			t.Fatalf("not newest first at %d", i)
		}
	}
	if len(seen) != len(created) {
		t.Fatalf("%d records, want %d", len(seen), len(created))
	}
}

// checkFiltered checks that got is exactly the created records q matches,
// and that there are some.
func checkFiltered(t *testing.T, q Query, got []Record, created map[string]Record) {
	t.Helper()
	match := func(r Record) bool {
		return (q.StudyInstanceUID == "" || r.StudyInstanceUID == q.StudyInstanceUID) && (q.Status == "" || r.Status == q.Status)
	}
	want := 0
	for _, r := range created {
		if match(r) {
			want++
		}
	}
	for _, r := range got {
		if !match(r) {
			t.Fatalf("%+v returned %+v", q, r)
		}
	}
	if len(got) != want || want == 0 {
		t.Fatalf("%+v: %d records, want %d", q, len(got), want)
	}
}

// checkUnfinished checks that Unfinished lists the 62 pending and running
// records (i%4 in {0,1} for i < 123: 31 + 31), oldest first.
func checkUnfinished(t *testing.T, s *Store) {
	t.Helper()
	un, err := s.Unfinished(context.Background())
	if err != nil {
		t.Fatal(err)
	}
	if len(un) != 62 {
		t.Fatalf("%d unfinished, want 62", len(un))
	}
	for i, r := range un {
		if r.Status != StatusPending && r.Status != StatusRunning {
			t.Fatalf("unfinished lists %s", r.Status)
		}
		if i > 0 && r.CreatedAt.Before(un[i-1].CreatedAt) {
			t.Fatal("unfinished not oldest first")
		}
	}
}
