package models

import (
	"errors"
	"fmt"
	"os"
	"os/exec"
	"path/filepath"
	"runtime"
	"strings"
	"sync"

	ort "github.com/yalue/onnxruntime_go"
)

// LibraryName is the file name of the ONNX Runtime shared library that
// midsag loads (the soname shipped by ONNX Runtime 1.x on Linux).
const LibraryName = "libonnxruntime.so.1"

// ErrLibraryNotFound is returned by FindLibrary when no candidate exists.
var ErrLibraryNotFound = errors.New("ONNX Runtime library not found; run `make ort` " +
	"(scripts/get-onnxruntime.sh) or set MIDSAG_ORT_LIB / --ort-lib")

// FindLibrary returns the path of the ONNX Runtime shared library. It looks,
// in order, at flagPath, the MIDSAG_ORT_LIB environment variable, the
// executable's folder, third_party/onnxruntime/linux-<arch>/ under the
// working directory and each of its parents (so tests in subpackages find
// the copy placed by scripts/get-onnxruntime.sh), and finally the system
// library path, for which it returns the bare LibraryName for dlopen to
// resolve. An explicit flagPath or MIDSAG_ORT_LIB that does not exist is an
// error rather than a reason to look further, so a typo is not hidden.
func FindLibrary(flagPath string) (string, error) {
	for _, c := range []struct{ from, path string }{
		{"--ort-lib", flagPath},
		{"MIDSAG_ORT_LIB", os.Getenv("MIDSAG_ORT_LIB")},
	} {
		if c.path == "" {
			continue
		}
		if !isFile(c.path) {
			return "", fmt.Errorf("%s %q: no such file: %w", c.from, c.path, ErrLibraryNotFound)
		}
		return c.path, nil
	}
	if exe, err := os.Executable(); err == nil {
		if p := filepath.Join(filepath.Dir(exe), LibraryName); isFile(p) {
			return p, nil
		}
	}
	if wd, err := os.Getwd(); err == nil {
		rel := filepath.Join("third_party", "onnxruntime", "linux-"+ortArch(), LibraryName)
		for dir := wd; ; dir = filepath.Dir(dir) {
			if p := filepath.Join(dir, rel); isFile(p) {
				return p, nil
			}
			if filepath.Dir(dir) == dir {
				break
			}
		}
	}
	if onSystemPath() {
		return LibraryName, nil
	}
	return "", ErrLibraryNotFound
}

// ortArch maps GOARCH to the architecture names of the onnxruntime-node
// package (bin/napi-v6/linux/<x64|arm64>).
func ortArch() string {
	if runtime.GOARCH == "amd64" {
		return "x64"
	}
	return runtime.GOARCH
}

func isFile(p string) bool {
	st, err := os.Stat(p)
	return err == nil && !st.IsDir()
}

// onSystemPath reports whether dlopen would find LibraryName without a
// path: in the ld.so cache (as "ldconfig -p" lists it), in LD_LIBRARY_PATH,
// or in the usual library folders (common practice for Debian-style
// multiarch systems).
func onSystemPath() bool {
	if out, err := exec.Command("ldconfig", "-p").Output(); err == nil &&
		strings.Contains(string(out), LibraryName+" ") {
		return true
	}
	dirs := filepath.SplitList(os.Getenv("LD_LIBRARY_PATH"))
	dirs = append(dirs, "/usr/local/lib", "/usr/lib", "/lib",
		"/usr/lib/"+gnuTriplet(), "/lib/"+gnuTriplet())
	for _, d := range dirs {
		if d != "" && isFile(filepath.Join(d, LibraryName)) {
			return true
		}
	}
	return false
}

func gnuTriplet() string {
	if runtime.GOARCH == "arm64" {
		return "aarch64-linux-gnu"
	}
	return "x86_64-linux-gnu"
}

// initState records the one ONNX Runtime environment of the process: ONNX
// Runtime allows a single environment, bound to the library first loaded.
var initState struct {
	mu   sync.Mutex
	path string
	err  error
	done bool
}

// Init loads the ONNX Runtime library at libPath and creates the process's
// ONNX Runtime environment. It runs once: later calls with the same path
// return the first call's result, and a call with a different path is an
// error, because a process cannot switch libraries once one is loaded.
func Init(libPath string) error {
	initState.mu.Lock()
	defer initState.mu.Unlock()
	if initState.done {
		if libPath != initState.path {
			return fmt.Errorf("ONNX Runtime already initialised from %q; cannot switch to %q", initState.path, libPath)
		}
		return initState.err
	}
	initState.done, initState.path = true, libPath
	ort.SetSharedLibraryPath(libPath)
	if err := ort.InitializeEnvironment(); err != nil {
		initState.err = fmt.Errorf("initialise ONNX Runtime from %q: %w", libPath, err)
	}
	return initState.err
}

// initialised reports whether Init succeeded.
func initialised() error {
	initState.mu.Lock()
	defer initState.mu.Unlock()
	if !initState.done {
		return errors.New("ONNX Runtime is not initialised; call models.Init first")
	}
	return initState.err
}
