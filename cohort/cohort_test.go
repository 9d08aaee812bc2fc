package cohort

import (
	"archive/zip"
	"context"
	"errors"
	"io"
	"os"
	"path/filepath"
	"slices"
	"sync/atomic"
	"testing"
	"time"

	"github.com/midsag/midsag"
	"github.com/midsag/midsag/phantom"
	"github.com/midsag/midsag/preprocess"
)

// countingHeaders counts header reads.
type countingHeaders struct {
	pre *preprocess.Preprocessor
	n   atomic.Int64
}

func (c *countingHeaders) ReadHeader(name string, r io.Reader, size int64) (*midsag.Instance, error) {
	c.n.Add(1)
	return c.pre.ReadHeader(name, r, size)
}

// TestDiscoverRereadsOnlyChanged checks the header index: a second walk
// reads no header, a changed file and a new zip archive's entries are the
// only reads of a third, a removed file leaves the index, and studies are
// grouped by Study Instance UID whatever the layout (the phantom's truth).
func TestDiscoverRereadsOnlyChanged(t *testing.T) {
	root := t.TempDir()
	truths, err := phantom.Generate(root, phantom.Options{Studies: 4, Seed: 21, NoDecoys: true, Syntaxes: []string{midsag.ExplicitVRLittleEndian}})
	if err != nil {
		t.Fatal(err)
	}
	st, err := Open(t.TempDir())
	if err != nil {
		t.Fatal(err)
	}
	defer st.Close()
	hr := &countingHeaders{pre: preprocess.New(preprocess.Options{})}
	ctx := context.Background()

	d1 := discover(t, st, root, hr)
	files := int(hr.n.Load())
	if d1.Read != files || d1.Studies != 4 || d1.Refused[midsag.ReasonNotDICOM] != 2 { // labels.csv, truth.json
		t.Fatalf("first walk: %+v after %d reads", d1, files)
	}
	wantStudies(t, st, truths)

	if d2 := discover(t, st, root, hr); hr.n.Load() != 0 || d2.Cached != files || d2.Read != 0 {
		t.Fatalf("unchanged rerun read %d headers: %+v", hr.n.Load(), d2)
	}

	s1 := changeCohort(t, root, truths)
	if d3 := discover(t, st, root, hr); hr.n.Load() != 4 || d3.Read != 4 || d3.Removed != 1 || d3.Cached != files-2 || d3.Studies != 4 {
		t.Fatalf("after one change, one removal and a 3-entry zip: %d reads, %+v", hr.n.Load(), d3)
	}
	if d4 := discover(t, st, root, hr); hr.n.Load() != 0 || d4.Cached != files+2 {
		t.Fatalf("rerun with the zip: %d reads, %+v", hr.n.Load(), d4)
	}
	sf, err := st.studyFiles(ctx, truths[1].StudyInstanceUID)
	if err != nil || len(sf) != len(s1)+3 {
		t.Fatalf("study 1 has %d files (%v), want %d", len(sf), err, len(s1)+3)
	}
}

// discover runs one discovery on two workers with the read count reset.
func discover(t *testing.T, st *Ledger, root string, hr *countingHeaders) *Discovery {
	t.Helper()
	hr.n.Store(0)
	d, err := st.Discover(context.Background(), root, hr, 2)
	if err != nil {
		t.Fatal(err)
	}
	return d
}

// wantStudies checks every study of the phantom's truth was discovered.
func wantStudies(t *testing.T, st *Ledger, truths []phantom.StudyTruth) {
	t.Helper()
	uids, err := st.Studies(context.Background())
	if err != nil {
		t.Fatal(err)
	}
	for _, tr := range truths {
		if !slices.Contains(uids, tr.StudyInstanceUID) {
			t.Errorf("study %s not discovered", tr.StudyInstanceUID)
		}
	}
}

// changeCohort changes one file of study 0 (new mtime), removes another,
// and adds a zip of three of study 1's files under another folder; it
// returns study 1's files.
func changeCohort(t *testing.T, root string, truths []phantom.StudyTruth) []string {
	t.Helper()
	s0, _ := filepath.Glob(filepath.Join(root, truths[0].Study, "*"))
	later := time.Now().Add(time.Hour)
	if err := os.Chtimes(s0[0], later, later); err != nil {
		t.Fatal(err)
	}
	if err := os.Remove(s0[1]); err != nil {
		t.Fatal(err)
	}
	s1, _ := filepath.Glob(filepath.Join(root, truths[1].Study, "*"))
	zf, err := os.Create(filepath.Join(root, "more.zip"))
	if err != nil {
		t.Fatal(err)
	}
	zw := zip.NewWriter(zf)
	for _, f := range s1[:3] {
		b, _ := os.ReadFile(f)
		w, _ := zw.Create("copy/" + filepath.Base(f))
		w.Write(b)
	}
	if err := zw.Close(); err != nil {
		t.Fatal(err)
	}
	zf.Close()
	return s1
}

// cancellingHeaders cancels the discovery's context at its first read.
type cancellingHeaders struct {
	countingHeaders
	cancel context.CancelFunc
}

func (c *cancellingHeaders) ReadHeader(name string, r io.Reader, size int64) (*midsag.Instance, error) {
	c.cancel()
	return c.countingHeaders.ReadHeader(name, r, size)
}

// TestDiscoverHonoursContext: once the context is cancelled, discovery
// reads no further header and returns the context's error, recording
// nothing of the batch it was in.
func TestDiscoverHonoursContext(t *testing.T) {
	root := t.TempDir()
	if _, err := phantom.Generate(root, phantom.Options{Studies: 2, Seed: 23, NoDecoys: true, Syntaxes: []string{midsag.ExplicitVRLittleEndian}}); err != nil {
		t.Fatal(err)
	}
	st, err := Open(t.TempDir())
	if err != nil {
		t.Fatal(err)
	}
	defer st.Close()
	ctx, cancel := context.WithCancel(context.Background())
	defer cancel()
	hr := &cancellingHeaders{countingHeaders: countingHeaders{pre: preprocess.New(preprocess.Options{})}, cancel: cancel}
	if _, err := st.Discover(ctx, root, hr, 1); !errors.Is(err, context.Canceled) {
		t.Fatalf("Discover after cancel: %v, want context.Canceled", err)
	}
	if n := hr.n.Load(); n != 1 {
		t.Errorf("%d headers read after the context was cancelled at the first, want 1", n)
	}
	if uids, err := st.Studies(context.Background()); err != nil || len(uids) != 0 {
		t.Errorf("a cancelled batch was recorded: %v, %v", uids, err)
	}
}

// TestShardFNV1a checks the shard hash against the FNV-1a 64 test vector
// for "a" (0xaf63dc4c8601ec8c, from the FNV reference by Fowler, Noll and
// Vo) and that shards partition a set of UIDs.
func TestShardFNV1a(t *testing.T) {
	const fnvA = uint64(0xaf63dc4c8601ec8c)
	for n := 1; n <= 7; n++ {
		for i := 0; i < n; i++ {
			if got, want := (Shard{Index: i, Count: n}).Has("a"), fnvA%uint64(n) == uint64(i); got != want {
				t.Errorf("shard %d/%d has \"a\" = %v, want %v", i, n, got, want)
			}
		}
	}
	for k := 0; k < 200; k++ {
		uid := "2.25." + string(rune('0'+k%10)) + string(rune('0'+k/10%10)) + string(rune('0'+k/100))
		hits := 0
		for i := 0; i < 3; i++ {
			if (Shard{Index: i, Count: 3}).Has(uid) {
				hits++
			}
		}
		if hits != 1 {
			t.Errorf("%s is in %d of 3 shards", uid, hits)
		}
	}
	for _, bad := range []string{"3/3", "-1/2", "1", "a/b", "0/0"} {
		if _, err := ParseShard(bad); err == nil {
			t.Errorf("ParseShard(%q) accepted", bad)
		}
	}
}

// TestDiscoverFollowsLinks discovers a cohort laid out as data-versioning
// tools do, with real symbolic links: the root is a link, one study is a
// folder of links to files in an object store, another a link to a study
// folder, with a link loop back to the root and a dangling link. Both
// studies are found (the phantom's truth), the loop ends, and the dangling
// link is counted as unreadable rather than skipped.
func TestDiscoverFollowsLinks(t *testing.T) {
	dir := t.TempDir()
	store := filepath.Join(dir, "store")
	truths, err := phantom.Generate(store, phantom.Options{Studies: 2, Seed: 22, NoDecoys: true, Syntaxes: []string{midsag.ExplicitVRLittleEndian}})
	if err != nil {
		t.Fatal(err)
	}
	cohortDir := filepath.Join(dir, "cohort")
	link := func(target, name string) {
		t.Helper()
		if err := os.MkdirAll(filepath.Dir(name), 0o755); err != nil {
			t.Fatal(err)
		}
		if err := os.Symlink(target, name); err != nil {
			t.Fatal(err)
		}
	}
	files0, _ := filepath.Glob(filepath.Join(store, truths[0].Study, "*"))
	for _, f := range files0 {
		link(f, filepath.Join(cohortDir, "a", filepath.Base(f)))
	}
	link(filepath.Join(store, truths[1].Study), filepath.Join(cohortDir, "b"))
	link(cohortDir, filepath.Join(cohortDir, "a", "loop"))
	link(filepath.Join(store, "gone.dcm"), filepath.Join(cohortDir, "a", "zz-missing.dcm"))
	rootLink := filepath.Join(dir, "cohort-link")
	link(cohortDir, rootLink)

	st, err := Open(t.TempDir())
	if err != nil {
		t.Fatal(err)
	}
	defer st.Close()
	hr := &countingHeaders{pre: preprocess.New(preprocess.Options{})}
	d, err := st.Discover(context.Background(), rootLink, hr, 2)
	if err != nil {
		t.Fatal(err)
	}
	files1, _ := filepath.Glob(filepath.Join(store, truths[1].Study, "*"))
	if d.Studies != 2 || d.Files != len(files0)+len(files1)+1 || d.Refused[midsag.ReasonUnreadable] != 1 {
		t.Errorf("discovery %+v; want 2 studies, %d files, 1 unreadable (the dangling link)", d, len(files0)+len(files1)+1)
	}
}
