package testtool

import (
	"encoding/csv"
	"net"
	"os"
	"path/filepath"
	"testing"
)

// WriteFile writes data to dir/name (a slash-separated relative path),
// making the folders it needs, and returns the path. A failure ends the
// test.
func WriteFile(t testing.TB, dir, name string, data []byte) string {
	t.Helper()
	p := filepath.Join(dir, filepath.FromSlash(name))
	if err := os.MkdirAll(filepath.Dir(p), 0o755); err != nil {
		t.Fatal(err)
	}
	if err := os.WriteFile(p, data, 0o644); err != nil {
		t.Fatal(err)
	}
	return p
}

// ReadCSV reads every record of a CSV file, header included. A failure
// ends the test.
func ReadCSV(t testing.TB, path string) [][]string {
	t.Helper()
	f, err := os.Open(path)
	if err != nil {
		t.Fatal(err)
	}
	defer f.Close()
	recs, err := csv.NewReader(f).ReadAll()
	if err != nil {
		t.Fatalf("%s: %v", path, err)
	}
	return recs
}

// FreeAddr returns a loopback address ("127.0.0.1:port") whose port was
// free a moment ago, for programs that cannot be given port 0.
func FreeAddr(t testing.TB) string {
	t.Helper()
	l, err := net.Listen("tcp", "127.0.0.1:0")
	if err != nil {
		t.Fatal(err)
	}
	defer l.Close()
	return l.Addr().String()
}
