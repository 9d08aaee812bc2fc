package inputs

import (
	"archive/zip"
	"os"
	"path/filepath"
	"slices"
	"strings"
	"testing"

	"github.com/midsag/midsag"
)

func write(t *testing.T, path string, b []byte) {
	t.Helper()
	if err := os.MkdirAll(filepath.Dir(path), 0o755); err != nil {
		t.Fatal(err)
	}
	if err := os.WriteFile(path, b, 0o644); err != nil {
		t.Fatal(err)
	}
}

func makeZip(t *testing.T, path string, names ...string) {
	t.Helper()
	f, err := os.Create(path)
	if err != nil {
		t.Fatal(err)
	}
	zw := zip.NewWriter(f)
	for _, n := range names {
		w, err := zw.Create(n)
		if err != nil {
			t.Fatal(err)
		}
		w.Write([]byte("x"))
	}
	if err := zw.Close(); err != nil {
		t.Fatal(err)
	}
	f.Close()
}

// TestCollect: folders are walked in name order without hidden files or
// folders; a zip archive named anything is opened by its signature, its
// folders, hidden entries and __MACOSX metadata skipped.
func TestCollect(t *testing.T) {
	dir := t.TempDir()
	for _, n := range []string{"s/b.dcm", "s/a.dcm", "s/sub/c", "s/.DS_Store", "s/.hidden/d.dcm"} {
		write(t, filepath.Join(dir, n), []byte("x"))
	}
	arch := filepath.Join(dir, "export.bin")
	makeZip(t, arch, "study/", "study/IM1", "study/._IM1", "__MACOSX/study/._IM1", "IM2")
	srcs, done, err := Collect([]string{filepath.Join(dir, "s"), arch}, DefaultLimits)
	if err != nil {
		t.Fatal(err)
	}
	defer done()
	var names []string
	for _, s := range srcs {
		names = append(names, strings.TrimPrefix(s.Name, dir+"/"))
	}
	want := []string{"s/a.dcm", "s/b.dcm", "s/sub/c", "export.bin!study/IM1", "export.bin!IM2"}
	if !slices.Equal(names, want) {
		t.Errorf("sources %v, want %v", names, want)
	}
	rc, err := srcs[3].Open()
	if err != nil {
		t.Fatal(err)
	}
	rc.Close()
}

// TestCollectRefusals: each refusal carries its reason code.
func TestCollectRefusals(t *testing.T) {
	dir := t.TempDir()
	empty := filepath.Join(dir, "empty")
	os.Mkdir(empty, 0o755)
	broken := filepath.Join(dir, "broken.zip")
	write(t, broken, []byte("PK\x03\x04 not really a zip"))
	many := filepath.Join(dir, "many.zip")
	names := make([]string, DefaultLimits.MaxEntries+1)
	for i := range names {
		names[i] = "f" + strings.Repeat("x", i%7) + string(rune('a'+i%26)) + "/" + string(rune('0'+i%10))
	}
	makeZip(t, many, names...)
	for path, want := range map[string]midsag.Reason{
		filepath.Join(dir, "missing"): midsag.ReasonNoInput,
		empty:                         midsag.ReasonNoInput,
		broken:                        midsag.ReasonNotDICOM,
		many:                          midsag.ReasonTooLarge,
	} {
		_, _, err := Collect([]string{path}, DefaultLimits)
		if r, ok := midsag.ReasonOf(err); !ok || r != want {
			t.Errorf("%s: %v, want reason %s", filepath.Base(path), err, want)
		}
	}
}

func TestRules(t *testing.T) {
	if !Hidden("a/.b") || Hidden("a/b") || !IsZip([]byte("PK\x03\x04rest")) || IsZip([]byte("PK\x05\x06")) {
		t.Error("Hidden or IsZip disagree with their definitions")
	}
}

// TestCollectFollowsLinks lays a cohort out as data-versioning tools do,
// with real symbolic links in a temporary folder: a study folder that is
// a link, a folder of file links into an object store, a link loop back
// to the root and a dangling link. Every file is found once per path, the
// loop ends, and the dangling link becomes a source whose Open gives a
// no_input refusal naming it.
func TestCollectFollowsLinks(t *testing.T) {
	dir := t.TempDir()
	objects := filepath.Join(dir, "objects")
	write(t, filepath.Join(objects, "aa"), []byte("one"))
	write(t, filepath.Join(objects, "bb"), []byte("two"))
	write(t, filepath.Join(dir, "real", "s1", "IM1"), []byte("three"))
	root := filepath.Join(dir, "cohort")
	links := map[string]string{
		filepath.Join(root, "s1"):            filepath.Join(dir, "real", "s1"),
		filepath.Join(root, "s2", "IM1"):     filepath.Join(objects, "aa"),
		filepath.Join(root, "s2", "IM2"):     filepath.Join(objects, "bb"),
		filepath.Join(root, "s2", "loop"):    root,
		filepath.Join(root, "s2", "missing"): filepath.Join(objects, "cc"),
	}
	for link, target := range links {
		if err := os.MkdirAll(filepath.Dir(link), 0o755); err != nil {
			t.Fatal(err)
		}
		if err := os.Symlink(target, link); err != nil {
			t.Fatal(err)
		}
	}
	// The root given as a link to the cohort folder.
	rootLink := filepath.Join(dir, "cohort-link")
	if err := os.Symlink(root, rootLink); err != nil {
		t.Fatal(err)
	}
	srcs, done, err := Collect([]string{rootLink}, DefaultLimits)
	if err != nil {
		t.Fatal(err)
	}
	defer done()
	var names []string
	var broken error
	for _, s := range srcs {
		rel, _ := filepath.Rel(rootLink, s.Name)
		names = append(names, rel)
		rc, err := s.Open()
		if err != nil {
			broken = err
			continue
		}
		rc.Close()
	}
	want := []string{"s1/IM1", "s2/IM1", "s2/IM2", "s2/missing"}
	if !slices.Equal(names, want) {
		t.Errorf("sources %v, want %v", names, want)
	}
	if r, ok := midsag.ReasonOf(broken); !ok || r != midsag.ReasonNoInput || !strings.Contains(broken.Error(), "missing") ||
		!strings.Contains(broken.Error(), "broken symbolic link") {
		t.Errorf("dangling link: %v, want a no_input refusal naming it", broken)
	}
	// A link loop alone is walked once and ends.
	loopRoot := filepath.Join(dir, "loop")
	if err := os.MkdirAll(loopRoot, 0o755); err != nil {
		t.Fatal(err)
	}
	write(t, filepath.Join(loopRoot, "IM"), []byte("x"))
	if err := os.Symlink(loopRoot, filepath.Join(loopRoot, "again")); err != nil {
		t.Fatal(err)
	}
	srcs, done2, err := Collect([]string{loopRoot}, DefaultLimits)
	if err != nil {
		t.Fatal(err)
	}
	defer done2()
	if len(srcs) != 1 {
		t.Errorf("loop: %d sources, want 1", len(srcs))
	}
}

// TestCollectMissingPathSaysSo: a path that does not exist is refused as
// no_input in words, without the system call's text ("stat ...").
func TestCollectMissingPathSaysSo(t *testing.T) {
	p := filepath.Join(t.TempDir(), "absent")
	_, _, err := Collect([]string{p}, DefaultLimits)
	if r, _ := midsag.ReasonOf(err); r != midsag.ReasonNoInput {
		t.Fatalf("reason %v (%v), want no_input", r, err)
	}
	if msg := err.Error(); !strings.Contains(msg, "no such file or folder") || strings.Contains(msg, "stat ") {
		t.Errorf("message %q", msg)
	}
}
