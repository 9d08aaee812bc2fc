package atomicfile

import (
	"bytes"
	"errors"
	"os"
	"path/filepath"
	"testing"
)

// entries lists the names in dir, so a test sees any temporary file left.
func entries(t *testing.T, dir string) []string {
	t.Helper()
	ents, err := os.ReadDir(dir)
	if err != nil {
		t.Fatal(err)
	}
	var names []string
	for _, e := range ents {
		names = append(names, e.Name())
	}
	return names
}

func TestWriteFileReplacesWhole(t *testing.T) {
	dir := t.TempDir()
	path := filepath.Join(dir, "result.json")
	if err := os.WriteFile(path, []byte("old"), 0o644); err != nil {
		t.Fatal(err)
	}
	if err := WriteFile(path, []byte("new contents"), Perm(0o644)); err != nil {
		t.Fatal(err)
	}
	got, err := os.ReadFile(path)
	if err != nil || string(got) != "new contents" {
		t.Fatalf("read %q, %v", got, err)
	}
	st, _ := os.Stat(path)
	if st.Mode().Perm() != 0o644 {
		t.Errorf("mode %v, want 0644", st.Mode().Perm())
	}
	if names := entries(t, dir); len(names) != 1 {
		t.Errorf("folder holds %v, want only result.json", names)
	}
}

func TestDefaultPermIsOwnerOnly(t *testing.T) {
	path := filepath.Join(t.TempDir(), "instance.dcm")
	if err := WriteFile(path, []byte("x")); err != nil {
		t.Fatal(err)
	}
	st, _ := os.Stat(path)
	if st.Mode().Perm() != 0o600 {
		t.Errorf("mode %v, want 0600", st.Mode().Perm())
	}
}

// TestStreamInvisibleUntilCommit: while a stream is written, the path
// still holds the previous file; only Commit swaps it.
func TestStreamInvisibleUntilCommit(t *testing.T) {
	dir := t.TempDir()
	path := filepath.Join(dir, "table.csv")
	os.WriteFile(path, []byte("before"), 0o644)
	f, err := Create(path)
	if err != nil {
		t.Fatal(err)
	}
	defer f.Abort()
	for range 3 {
		if _, err := f.Write(bytes.Repeat([]byte("row\n"), 1000)); err != nil {
			t.Fatal(err)
		}
		if got, _ := os.ReadFile(path); string(got) != "before" {
			t.Fatalf("path holds %d bytes mid-stream", len(got))
		}
	}
	if err := f.Commit(); err != nil {
		t.Fatal(err)
	}
	if got, _ := os.ReadFile(path); len(got) != 12000 {
		t.Errorf("committed %d bytes, want 12000", len(got))
	}
	if err := f.Commit(); err == nil {
		t.Error("a second Commit succeeded")
	}
}

func TestAbortLeavesNothing(t *testing.T) {
	dir := t.TempDir()
	f, err := Create(filepath.Join(dir, "out.png"))
	if err != nil {
		t.Fatal(err)
	}
	f.Write([]byte("partial"))
	f.Abort()
	if names := entries(t, dir); len(names) != 0 {
		t.Errorf("folder holds %v after Abort", names)
	}
}

// TestFailedWriteLeavesNoPartialFile: a write that fails (here the
// temporary file's descriptor is closed under it, as an I/O error would
// leave it) makes Commit fail, removes the temporary file and leaves the
// previous file untouched.
func TestFailedWriteLeavesNoPartialFile(t *testing.T) {
	dir := t.TempDir()
	path := filepath.Join(dir, "results.jsonl")
	os.WriteFile(path, []byte("previous"), 0o644)
	f, err := Create(path)
	if err != nil {
		t.Fatal(err)
	}
	f.Write([]byte("half of it"))
	f.f.Close()
	if _, err := f.Write([]byte("the rest")); err == nil {
		t.Fatal("write to a closed file succeeded")
	}
	if err := f.Commit(); !errors.Is(err, os.ErrClosed) {
		t.Fatalf("Commit = %v, want the write's error", err)
	}
	if got, _ := os.ReadFile(path); string(got) != "previous" {
		t.Errorf("path holds %q after a failed write", got)
	}
	if names := entries(t, dir); len(names) != 1 {
		t.Errorf("folder holds %v, want only the previous file", names)
	}
}

// TestFailedRenameLeavesNoTemp: the target is a non-empty folder, which
// rename(2) refuses to replace with a file (EISDIR); the temporary file
// must go and the folder stay.
func TestFailedRenameLeavesNoTemp(t *testing.T) {
	dir := t.TempDir()
	path := filepath.Join(dir, "target")
	os.MkdirAll(filepath.Join(path, "inner"), 0o755)
	if err := WriteFile(path, []byte("data")); err == nil {
		t.Fatal("renaming over a folder succeeded")
	}
	if names := entries(t, dir); len(names) != 1 || names[0] != "target" {
		t.Errorf("folder holds %v, want only target", names)
	}
	if st, err := os.Stat(filepath.Join(path, "inner")); err != nil || !st.IsDir() {
		t.Errorf("the folder was damaged: %v", err)
	}
}

func TestCreateInMissingFolder(t *testing.T) {
	if _, err := Create(filepath.Join(t.TempDir(), "missing", "f")); err == nil {
		t.Error("Create in a missing folder succeeded")
	}
}

func TestTempNameEndsWithSuffix(t *testing.T) {
	dir := t.TempDir()
	f, err := Create(filepath.Join(dir, "a.dcm"))
	if err != nil {
		t.Fatal(err)
	}
	defer f.Abort()
	names := entries(t, dir)
	if len(names) != 1 || filepath.Ext(names[0]) != TempSuffix || names[0][0] != '.' {
		t.Errorf("temporary file %v: want a hidden name ending in %s", names, TempSuffix)
	}
}
