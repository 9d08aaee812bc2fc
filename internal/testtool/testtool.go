// Package testtool finds the outside reference tools that tests compare
// against (DCMTK, dicom3tools, pydicom's test files) and skips or fails a
// test when they are missing: tests skip unless MIDSAG_REQUIRE_TOOLS=1,
// which CI sets after installing them.
package testtool

import (
	"os"
	"os/exec"
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
