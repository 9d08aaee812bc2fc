package store

import (
	"context"
	"errors"
	"fmt"
	"math/rand/v2"
	"os"
	"path/filepath"
	"strings"
	"testing"
)

// filled opens a store in a new folder with n instances of one study and
// as many records, so the database spans many pages.
func filled(t *testing.T, n int) (string, *Store, []Instance) {
	t.Helper()
	dir := t.TempDir()
	s, err := Open(dir, Options{})
	if err != nil {
		t.Fatal(err)
	}
	var out []Instance
	for i := range n {
		sop := fmt.Sprintf("1.2.3.1.%d", i)
		in, _, err := s.Put(context.Background(), inst("1.2.3", sop), payload(sop, 0, 512))
		if err != nil {
			t.Fatal(err)
		}
		if _, err := s.CreateRecord(context.Background(), Record{StudyInstanceUID: "1.2.3", Status: StatusDone, Message: strings.Repeat("m", 200)}); err != nil {
			t.Fatal(err)
		}
		out = append(out, in)
	}
	return dir, s, out
}

// TestSpoolFileTruncated: a spool file cut short is refused when opened
// with ErrCorrupt (its size no longer matches the row's), one with a
// flipped byte by its sha256, and a missing one too; Check reports each as
// corrupt or missing and passes the untouched instances.
func TestSpoolFileTruncated(t *testing.T) {
	dir, s, insts := filled(t, 4)
	defer s.Close()
	p := func(in Instance) string { return filepath.Join(dir, filepath.FromSlash(in.Path)) }
	if err := os.Truncate(p(insts[0]), 100); err != nil {
		t.Fatal(err)
	}
	b, _ := os.ReadFile(p(insts[1]))
	b[10] ^= 0xFF
	os.WriteFile(p(insts[1]), b, 0o600)
	os.Remove(p(insts[2]))
	for i, in := range insts[:3] {
		if _, err := s.Open(in); !errors.Is(err, ErrCorrupt) {
			t.Errorf("instance %d: Open %v, want ErrCorrupt", i, err)
		}
	}
	rc, err := s.Open(insts[3])
	if err != nil {
		t.Fatalf("untouched instance: %v", err)
	}
	if got := fileSHA(t, s, insts[3]); got != insts[3].SHA256 {
		t.Errorf("untouched instance reads as %s", got)
	}
	rc.Close()
	rep, err := Check(context.Background(), dir, nil)
	if err != nil {
		t.Fatal(err)
	}
	kinds := map[string]string{}
	for _, p := range rep.Problems {
		kinds[p.SOPInstanceUID] = p.Kind
	}
	want := map[string]string{insts[0].SOPInstanceUID: "corrupt", insts[1].SOPInstanceUID: "corrupt", insts[2].SOPInstanceUID: "missing"}
	if rep.Instances != 4 || !rep.Bad() || fmt.Sprint(kinds) != fmt.Sprint(want) {
		t.Errorf("Check: %d instances, problems %+v; want 4 and %v", rep.Instances, rep.Problems, want)
	}
}

// TestDatabaseNoise: 4 KiB of random bytes written over a page in the
// middle of a real SQLite store file (after a clean close, so the WAL is
// checkpointed into it) is found by PRAGMA quick_check at Open: the store
// opens, Healthy and Ping report the damage, Check reports it as a
// database problem, and no spool file is swept although rows may be
// unreadable. An undamaged store passes all three.
func TestDatabaseNoise(t *testing.T) {
	dir, s, insts := filled(t, 300)
	if err := s.Healthy(); err != nil {
		t.Fatalf("fresh store: %v", err)
	}
	if rep, err := Check(context.Background(), dir, nil); err != nil || len(rep.Problems) != 0 || rep.Instances != 300 {
		t.Fatalf("fresh store: %+v, %v", rep, err)
	}
	s.Close()
	db := filepath.Join(dir, "midsag.db")
	st, err := os.Stat(db)
	if err != nil {
		t.Fatal(err)
	}
	const page = 4096 // SQLite's default page size (https://www.sqlite.org/pragma.html#pragma_page_size)
	off := st.Size() / 2 / page * page
	noise := make([]byte, page)
	rand.NewChaCha8([32]byte{3}).Read(noise)
	f, err := os.OpenFile(db, os.O_WRONLY, 0)
	if err != nil {
		t.Fatal(err)
	}
	if _, err := f.WriteAt(noise, off); err != nil {
		t.Fatal(err)
	}
	f.Close()
	t.Logf("noise at byte %d of %d", off, st.Size())

	s, err = Open(dir, Options{})
	if err != nil {
		// Refusing to open is an honest answer too, but it must say so.
		if !strings.Contains(err.Error(), "malformed") && !errors.Is(err, ErrDamaged) {
			t.Fatalf("Open of a damaged store: %v", err)
		}
		return
	}
	defer s.Close()
	if err := s.Healthy(); !errors.Is(err, ErrDamaged) {
		t.Errorf("Healthy: %v, want ErrDamaged", err)
	}
	if err := s.Ping(context.Background()); !errors.Is(err, ErrDamaged) {
		t.Errorf("Ping: %v, want ErrDamaged", err)
	}
	for _, in := range insts {
		if _, err := os.Stat(filepath.Join(dir, filepath.FromSlash(in.Path))); err != nil {
			t.Fatalf("spool file of %s gone after opening a damaged store: %v", in.SOPInstanceUID, err)
		}
	}
	rep, err := Check(context.Background(), dir, nil)
	if err != nil {
		t.Fatal(err)
	}
	if !rep.Bad() || rep.Problems[0].Kind != "database" {
		t.Errorf("Check of a damaged store: %+v", rep.Problems)
	}
	t.Logf("quick_check: %v", s.Healthy())
}
