package store

import (
	"context"
	"crypto/sha256"
	"encoding/hex"
	"errors"
	"fmt"
	"io"
	"math/rand/v2"
	"os"
	"path/filepath"
	"strings"
	"sync"
	"testing"
	"time"
)

func openT(t testing.TB, dir string, opts Options) *Store {
	t.Helper()
	s, err := Open(dir, opts)
	if err != nil {
		t.Fatalf("Open: %v", err)
	}
	t.Cleanup(func() { s.Close() })
	return s
}

// payload returns deterministic bytes for a UID and version, so a test can
// recompute what was sent without remembering it.
func payload(uid string, version, size int) []byte {
	seed := sha256.Sum256([]byte(fmt.Sprintf("%s/%d", uid, version)))
	r := rand.New(rand.NewChaCha8(seed))
	b := make([]byte, size)
	for i := range b {
		b[i] = byte(r.Uint32())
	}
	return b
}

func inst(study, sop string) Instance {
	return Instance{
		StudyInstanceUID:  study,
		SeriesInstanceUID: study + ".1",
		SOPInstanceUID:    sop,
		SOPClassUID:       "1.2.840.10008.5.1.4.1.1.4", // MR Image Storage, PS3.4 B.5
		TransferSyntaxUID: "1.2.840.10008.1.2.1",       // Explicit VR Little Endian, PS3.5 A.2
		Origin:            "rest",
	}
}

func fileSHA(t testing.TB, s *Store, in Instance) string {
	t.Helper()
	rc, err := s.Open(in)
	if err != nil {
		t.Fatalf("open %s: %v", in.SOPInstanceUID, err)
	}
	defer rc.Close()
	h := sha256.New()
	if _, err := io.Copy(h, rc); err != nil {
		t.Fatalf("read %s: %v", in.SOPInstanceUID, err)
	}
	return hex.EncodeToString(h.Sum(nil))
}

// TestPragmas checks the connection really runs in WAL mode with
// synchronous=FULL: per https://www.sqlite.org/pragma.html#pragma_synchronous
// only FULL (2) or EXTRA (3) makes a WAL commit durable across power loss,
// and a DSN typo would silently leave NORMAL or the rollback journal.
func TestPragmas(t *testing.T) {
	s := openT(t, t.TempDir(), Options{})
	var mode string
	var sync int
	if err := s.w.QueryRow(`PRAGMA journal_mode`).Scan(&mode); err != nil {
		t.Fatal(err)
	}
	if err := s.w.QueryRow(`PRAGMA synchronous`).Scan(&sync); err != nil {
		t.Fatal(err)
	}
	if mode != "wal" || sync != 2 {
		t.Fatalf("journal_mode=%s synchronous=%d, want wal and 2 (FULL)", mode, sync)
	}
}

func TestMigrationsIdempotent(t *testing.T) {
	dir := t.TempDir()
	for range 3 {
		s, err := Open(dir, Options{})
		if err != nil {
			t.Fatal(err)
		}
		var rows, v int
		if err := s.r.QueryRow(`SELECT COUNT(*), MAX(version) FROM schema_version`).Scan(&rows, &v); err != nil {
			t.Fatal(err)
		}
		if rows != 1 || v != len(migrations) {
			t.Fatalf("schema_version has %d rows, version %d; want 1 row, %d", rows, v, len(migrations))
		}
		s.Close()
	}
}

// TestPutDurableAcrossReopen: once Put returns, a new Store on the same
// folder sees the row and a file with the same SHA-256.
func TestPutDurableAcrossReopen(t *testing.T) {
	dir := t.TempDir()
	s, err := Open(dir, Options{})
	if err != nil {
		t.Fatal(err)
	}
	data := payload("1.2.3.4", 0, 5000)
	got, dup, err := s.Put(context.Background(), inst("1.2.3", "1.2.3.4"), data)
	if err != nil || dup {
		t.Fatalf("Put: dup=%v err=%v", dup, err)
	}
	want := sha256.Sum256(data)
	if got.SHA256 != hex.EncodeToString(want[:]) || got.Size != 5000 || got.Seq <= 0 ||
		got.ReceivedAt.Location() != time.UTC || !strings.HasPrefix(got.Path, "spool/") {
		t.Fatalf("Put filled %+v", got)
	}
	// Deliberately no Close: a crashed process never closes either. The
	// kernel drops a dead process's flock; closing the lock file does that
	// here.
	s.lock.Close()
	s2 := openT(t, dir, Options{})
	list, err := s2.Instances(context.Background(), "1.2.3", 0)
	if err != nil {
		t.Fatal(err)
	}
	if len(list) != 1 || list[0].SHA256 != got.SHA256 || list[0].Seq != got.Seq {
		t.Fatalf("after reopen: %+v", list)
	}
	if sum := fileSHA(t, s2, list[0]); sum != got.SHA256 {
		t.Fatalf("file sha256 %s, row says %s", sum, got.SHA256)
	}
	s.Close()
}

// TestOpenRemovesLeftovers simulates a crash at each step of Put: a temp
// file before rename, and a renamed file whose row never committed. Neither
// was acknowledged, so Open removes both and neither is listed.
func TestOpenRemovesLeftovers(t *testing.T) {
	dir := t.TempDir()
	s := openT(t, dir, Options{})
	ctx := context.Background()
	kept, _, err := s.Put(ctx, inst("1.2.3", "1.2.3.1"), []byte("kept"))
	if err != nil {
		t.Fatal(err)
	}
	s.Close()
	studyDir := filepath.Join(dir, "spool", uidHash("1.2.3"))
	leftovers := []string{
		filepath.Join(studyDir, ".put-123"+tmpSuffix),
		filepath.Join(dir, "spool", ".ping-1"+tmpSuffix),
		filepath.Join(studyDir, uidHash("1.2.3.2")+"-"+strings.Repeat("ab", 32)+".dcm"),
		filepath.Join(dir, "spool", uidHash("9.9"), ".put-9"+tmpSuffix),
	}
	for _, p := range leftovers {
		os.MkdirAll(filepath.Dir(p), 0o750)
		if err := os.WriteFile(p, []byte("partial"), 0o640); err != nil {
			t.Fatal(err)
		}
	}
	s2 := openT(t, dir, Options{})
	for _, p := range leftovers {
		if _, err := os.Stat(p); !errors.Is(err, os.ErrNotExist) {
			t.Errorf("leftover %s still there (err=%v)", p, err)
		}
	}
	got, err := s2.InstancesBySOP(ctx, []string{"1.2.3.1", "1.2.3.2"})
	if err != nil {
		t.Fatal(err)
	}
	if len(got) != 1 || got[0].Seq != kept.Seq {
		t.Fatalf("listed %+v, want only the acknowledged instance", got)
	}
	if fileSHA(t, s2, got[0]) != kept.SHA256 {
		t.Fatal("acknowledged file damaged by the sweep")
	}
}

func TestDuplicateAndReplacement(t *testing.T) {
	s := openT(t, t.TempDir(), Options{})
	ctx := context.Background()
	a := payload("1.2.3.1", 1, 300)
	b := payload("1.2.3.1", 2, 300)
	first, dup, err := s.Put(ctx, inst("1.2.3", "1.2.3.1"), a)
	if err != nil || dup {
		t.Fatalf("first: dup=%v err=%v", dup, err)
	}
	again, dup, err := s.Put(ctx, inst("1.2.3", "1.2.3.1"), a)
	if err != nil || !dup || again.Seq != first.Seq {
		t.Fatalf("same bytes: dup=%v seq %d->%d err=%v", dup, first.Seq, again.Seq, err)
	}
	repl, dup, err := s.Put(ctx, inst("1.2.3", "1.2.3.1"), b)
	if err != nil || dup || repl.Seq <= first.Seq || repl.SHA256 == first.SHA256 {
		t.Fatalf("new bytes: dup=%v seq %d->%d err=%v", dup, first.Seq, repl.Seq, err)
	}
	list, err := s.Instances(ctx, "1.2.3", 0)
	if err != nil {
		t.Fatal(err)
	}
	if len(list) != 1 || list[0].Seq != repl.Seq || fileSHA(t, s, list[0]) != repl.SHA256 {
		t.Fatalf("after replacement: %+v", list)
	}
	if _, err := os.Stat(filepath.Join(s.dir, filepath.FromSlash(first.Path))); !errors.Is(err, os.ErrNotExist) {
		t.Fatalf("replaced version's file still present: %v", err)
	}
	// Instances up to the old sequence number no longer include it: the
	// old version is gone, not kept beside the new one.
	if old, _ := s.Instances(ctx, "1.2.3", first.Seq); len(old) != 0 {
		t.Fatalf("Instances(maxSeq=%d) = %+v", first.Seq, old)
	}
	st, err := s.Stats(ctx)
	if err != nil || st.Instances != 1 || st.Studies != 1 {
		t.Fatalf("Stats = %+v, %v", st, err)
	}
}

func TestMaxInstancesPerStudy(t *testing.T) {
	for _, gc := range []time.Duration{0, 2 * time.Millisecond} {
		t.Run(fmt.Sprint("group=", gc), func(t *testing.T) {
			s := openT(t, t.TempDir(), Options{MaxInstancesPerStudy: 10, GroupCommit: gc})
			ctx := context.Background()
			var mu sync.Mutex
			ok, full := 0, 0
			var wg sync.WaitGroup
			for g := range 8 {
				wg.Go(func() {
					for i := range 5 {
						sop := fmt.Sprintf("1.2.3.%d.%d", g, i)
						_, _, err := s.Put(ctx, inst("1.2.3", sop), []byte(sop))
						mu.Lock()
						switch {
						case err == nil:
							ok++
						case errors.Is(err, ErrStudyFull):
							full++
						default:
							t.Error(err)
						}
						mu.Unlock()
					}
				})
			}
			wg.Wait()
			if ok != 10 || full != 30 {
				t.Fatalf("%d stored, %d refused; want 10 and 30", ok, full)
			}
			list, _ := s.Instances(ctx, "1.2.3", 0)
			if len(list) != 10 {
				t.Fatalf("%d listed", len(list))
			}
			// A replacement inside a full study is not a new instance.
			if _, _, err := s.Put(ctx, list[0], []byte("v2")); err != nil {
				t.Fatalf("replacement in a full study: %v", err)
			}
			// Another study is unaffected.
			if _, _, err := s.Put(ctx, inst("1.2.4", "1.2.4.1"), []byte("x")); err != nil {
				t.Fatal(err)
			}
			files, _ := os.ReadDir(filepath.Join(s.spool, uidHash("1.2.3")))
			if len(files) != 10 {
				t.Fatalf("%d files in the full study's folder, want 10", len(files))
			}
		})
	}
}

func TestConcurrentPuts(t *testing.T) {
	for _, gc := range []time.Duration{0, 2 * time.Millisecond} {
		t.Run(fmt.Sprint("group=", gc), func(t *testing.T) {
			dir := t.TempDir()
			s := openT(t, dir, Options{GroupCommit: gc})
			ctx := context.Background()
			var wg sync.WaitGroup
			for g := range 8 {
				wg.Go(func() {
					for i := range 50 {
						study := fmt.Sprintf("1.2.%d", i%4)
						sop := fmt.Sprintf("%s.%d.%d", study, g, i)
						if _, _, err := s.Put(ctx, inst(study, sop), payload(sop, 0, 1024)); err != nil {
							t.Error(err)
						}
					}
				})
			}
			wg.Wait()
			s.Close()
			s2 := openT(t, dir, Options{})
			seen := map[int64]bool{}
			total := 0
			for i := range 4 {
				list, err := s2.Instances(ctx, fmt.Sprintf("1.2.%d", i), 0)
				if err != nil {
					t.Fatal(err)
				}
				for _, in := range list {
					if seen[in.Seq] {
						t.Fatalf("seq %d twice", in.Seq)
					}
					seen[in.Seq] = true
					want := sha256.Sum256(payload(in.SOPInstanceUID, 0, 1024))
					if fileSHA(t, s2, in) != hex.EncodeToString(want[:]) {
						t.Fatalf("%s: wrong bytes", in.SOPInstanceUID)
					}
				}
				total += len(list)
			}
			if total != 400 {
				t.Fatalf("%d instances, want 400", total)
			}
		})
	}
}

func TestPutAfterClose(t *testing.T) {
	s, err := Open(t.TempDir(), Options{GroupCommit: time.Millisecond})
	if err != nil {
		t.Fatal(err)
	}
	s.Close()
	if _, _, err := s.Put(context.Background(), inst("1", "1.1"), nil); !errors.Is(err, ErrClosed) {
		t.Fatalf("Put after Close: %v", err)
	}
}

func TestPing(t *testing.T) {
	s := openT(t, t.TempDir(), Options{})
	if err := s.Ping(context.Background()); err != nil {
		t.Fatal(err)
	}
	entries, _ := os.ReadDir(s.spool)
	if len(entries) != 0 {
		t.Fatalf("probe left behind: %v", entries)
	}
	// A read-only spool must fail the probe (skipped as root, who can
	// write anyway).
	if os.Geteuid() != 0 {
		os.Chmod(s.spool, 0o500)
		defer os.Chmod(s.spool, 0o750)
		if err := s.Ping(context.Background()); err == nil {
			t.Fatal("Ping succeeded on a read-only spool")
		}
	}
}
