package dimse

import (
	"context"
	"io"
	"log/slog"
	"net"
	"os"
	"os/exec"
	"path/filepath"
	"sync"
	"testing"
	"time"

	"github.com/midsag/midsag/internal/testtool"
	"github.com/midsag/midsag/phantom"
	"github.com/midsag/midsag/server"
)

// received collects what a test SCP's handler got.
type received struct {
	mu    sync.Mutex
	files map[string][]byte // by SOP Instance UID from the meta
	assoc []Association
}

func (r *received) handler(status uint16) StoreHandler {
	return func(_ context.Context, a Association, part10 []byte) Status {
		m, err := parsePart10(part10)
		if err != nil {
			return Status{Code: StatusCannotUnderstand}
		}
		r.mu.Lock()
		defer r.mu.Unlock()
		if r.files == nil {
			r.files = map[string][]byte{}
		}
		r.files[m.SOPInstanceUID] = append([]byte(nil), part10...)
		r.assoc = append(r.assoc, a)
		return Status{Code: status}
	}
}

func (r *received) count() int {
	r.mu.Lock()
	defer r.mu.Unlock()
	return len(r.files)
}

// startSCP runs a Server on a free loopback port until the test ends and
// returns its address and port.
func startSCP(t testing.TB, cfg Config, h StoreHandler) (*Server, string, string) {
	t.Helper()
	if cfg.AETitle == "" {
		cfg.AETitle = "MIDSAG"
	}
	if cfg.Logger == nil {
		cfg.Logger = slog.New(slog.NewTextHandler(io.Discard, nil))
	}
	if cfg.DrainTimeout == 0 {
		cfg.DrainTimeout = 2 * time.Second
	}
	if cfg.StatusOf == nil {
		cfg.StatusOf = server.DICOMStatus
	}
	s, err := NewServer(cfg, h)
	if err != nil {
		t.Fatal(err)
	}
	l, err := net.Listen("tcp", "127.0.0.1:0")
	if err != nil {
		t.Fatal(err)
	}
	ctx, cancel := context.WithCancel(context.Background())
	done := make(chan error, 1)
	go func() { done <- s.Serve(ctx, l) }()
	t.Cleanup(func() {
		cancel()
		select {
		case err := <-done:
			if err != nil {
				t.Errorf("Serve: %v", err)
			}
		case <-time.After(10 * time.Second):
			t.Errorf("Serve did not return after cancel")
		}
	})
	addr := l.Addr().String()
	_, port, _ := net.SplitHostPort(addr)
	return s, addr, port
}

// dcmtk runs a DCMTK tool with TCP_NODELAY=1 and a bound on its run time,
// returning its combined output and error.
func dcmtk(t testing.TB, name string, args ...string) ([]byte, error) {
	t.Helper()
	path := testtool.Command(t, name)
	ctx, cancel := context.WithTimeout(context.Background(), 60*time.Second)
	defer cancel()
	cmd := exec.CommandContext(ctx, path, args...)
	cmd.Env = append(os.Environ(), "TCP_NODELAY=1")
	return cmd.CombinedOutput()
}

// studyDir writes one phantom study in the given transfer syntax and
// returns its folder and files by name.
func studyDir(t testing.TB, seed int64, syntax string) (string, map[string][]byte) {
	t.Helper()
	dir := t.TempDir()
	opts := phantom.Options{Studies: 1, Seed: seed}
	if syntax != "" {
		opts.Syntaxes = []string{syntax}
	}
	if _, err := phantom.Generate(dir, opts); err != nil {
		t.Fatal(err)
	}
	study := filepath.Join(dir, "study-0000")
	ents, err := os.ReadDir(study)
	if err != nil {
		t.Fatal(err)
	}
	files := map[string][]byte{}
	for _, e := range ents {
		b, err := os.ReadFile(filepath.Join(study, e.Name()))
		if err != nil {
			t.Fatal(err)
		}
		files[e.Name()] = b
	}
	if len(files) < 10 {
		t.Fatalf("phantom study has only %d files", len(files))
	}
	return study, files
}

// freePort returns a loopback port that was free a moment ago, for tools
// that cannot take port 0.
func freePort(t testing.TB) string {
	t.Helper()
	_, port, err := net.SplitHostPort(testtool.FreeAddr(t))
	if err != nil {
		t.Fatal(err)
	}
	return port
}

// dialEcho opens a TCP connection to addr and sends an A-ASSOCIATE-RQ
// for Verification; the caller reads the answer.
func dialEcho(t *testing.T, addr string) net.Conn {
	t.Helper()
	c, err := net.Dial("tcp", addr)
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() { c.Close() })
	if _, err := c.Write(echoRQ()); err != nil {
		t.Fatal(err)
	}
	return c
}
