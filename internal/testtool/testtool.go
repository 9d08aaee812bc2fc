// Package testtool finds the outside reference tools that tests compare
// against (DCMTK, GDCM, dicom3tools, pydicom's test files, the real DICOM
// samples beside the checkout) and skips or fails a
// test when they are missing: tests skip unless MIDSAG_REQUIRE_TOOLS=1,
// which CI sets after installing them.
package testtool

import (
	"os"
	"os/exec"
	"path/filepath"
	"strings"
	"testing"
)

// PydicomTestFiles is where Debian's python3-pydicom installs pydicom's
// test DICOM files.
const PydicomTestFiles = "/usr/lib/python3/dist-packages/pydicom/data/test_files"

// Required reports whether missing tools must fail tests.
func Required() bool { return os.Getenv("MIDSAG_REQUIRE_TOOLS") == "1" }

// missing skips or fails t.
func missing(t testing.TB, what string) {
	t.Helper()
	if Required() {
		t.Fatalf("%s is missing and MIDSAG_REQUIRE_TOOLS=1", what)
	}
	t.Skipf("%s is missing; install it or run .ci/run", what)
}

// Command returns the path of an external program or skips/fails t.
func Command(t testing.TB, name string) string {
	t.Helper()
	p, err := exec.LookPath(name)
	if err != nil {
		missing(t, name)
	}
	return p
}

// PydicomFile returns the path of one of pydicom's test files or
// skips/fails t.
func PydicomFile(t testing.TB, name string) string {
	t.Helper()
	p := PydicomTestFiles + "/" + name
	if _, err := os.Stat(p); err != nil {
		missing(t, "pydicom test file "+name+" (Debian package python3-pydicom)")
	}
	return p
}

// Run runs a command and fails t with its output if it fails.
func Run(t testing.TB, name string, args ...string) []byte {
	t.Helper()
	out, err := exec.Command(Command(t, name), args...).CombinedOutput()
	if err != nil {
		t.Fatalf("%s %v: %v\n%s", name, args, err, out)
	}
	return out
}

// Python returns Debian's /usr/bin/python3 if it imports the given
// modules, or skips/fails t.
func Python(t testing.TB, modules ...string) string {
	t.Helper()
	const py = "/usr/bin/python3"
	args := []string{"-c", "import " + strings.Join(append([]string{"sys"}, modules...), ", ")}
	if err := exec.Command(py, args...).Run(); err != nil {
		missing(t, py+" with "+strings.Join(modules, ", "))
	}
	return py
}

// GDCMConv returns GDCM's gdcmconv (Debian package libgdcm-tools) or
// skips/fails t.
func GDCMConv(t testing.TB) string {
	t.Helper()
	return Command(t, "gdcmconv")
}

// RealData returns the folder of real DICOM samples: testdata/realdata in
// the repository (copied from the project's shared/realdata with each
// origin's licence; FILES.tsv names every file's origin, commit and
// sha256), or the folder MIDSAG_REALDATA names.
func RealData(t testing.TB) string {
	t.Helper()
	if d := os.Getenv("MIDSAG_REALDATA"); d != "" {
		if _, err := os.Stat(filepath.Join(d, "FILES.tsv")); err != nil {
			t.Fatalf("MIDSAG_REALDATA=%s has no FILES.tsv: %v", d, err)
		}
		return d
	}
	dir, err := os.Getwd()
	if err != nil {
		t.Fatal(err)
	}
	for {
		if _, err := os.Stat(filepath.Join(dir, "go.mod")); err == nil {
			d := filepath.Join(dir, "testdata", "realdata")
			if _, err := os.Stat(filepath.Join(d, "FILES.tsv")); err != nil {
				t.Fatalf("real DICOM samples not found at %s: %v", d, err)
			}
			return d
		}
		parent := filepath.Dir(dir)
		if parent == dir {
			t.Fatal("module root not found, so neither are the real DICOM samples in its testdata")
		}
		dir = parent
	}
}

// Need skips or fails t, as a missing tool does, when ok is false; what
// says what is missing and how to get it.
func Need(t testing.TB, ok bool, what string) {
	t.Helper()
	if !ok {
		missing(t, what)
	}
}
