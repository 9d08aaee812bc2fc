package main

import (
	"bytes"
	"net"
	"os"
	"os/exec"
	"path/filepath"
	"testing"
	"time"

	"github.com/midsag/midsag"
	"github.com/midsag/midsag/internal/testtool"
	"github.com/midsag/midsag/phantom"
)

// BenchmarkStorescuToService times DCMTK's storescu sending one phantom
// study (about 45 files with its decoys, Explicit VR Little Endian) to
// `midsag serve`, which parses each instance and makes it durable (spool
// file fsynced and renamed, SQLite row committed) before answering, and,
// in the same run, to DCMTK's storescp -od as the baseline. Each iteration
// sends a study not sent before, so midsag never takes its duplicate
// path. bench/storescu-service.sh prints the ratio.
func BenchmarkStorescuToService(b *testing.B) {
	storescu := testtool.Command(b, "storescu")
	send := func(b *testing.B, addr, aec, dir string) {
		host, port, _ := net.SplitHostPort(addr)
		cmd := exec.Command(storescu, "-aec", aec, "+sd", host, port, dir)
		cmd.Env = append(os.Environ(), "TCP_NODELAY=1")
		if out, err := cmd.CombinedOutput(); err != nil {
			b.Fatalf("storescu: %v\n%s", err, out)
		}
	}
	studies := func(b *testing.B, seed int64) []string {
		b.Helper()
		dir := b.TempDir()
		truths, err := phantom.Generate(dir, phantom.Options{Studies: b.N, Seed: seed, Syntaxes: []string{midsag.ExplicitVRLittleEndian}})
		if err != nil {
			b.Fatal(err)
		}
		var out []string
		for _, t := range truths {
			out = append(out, filepath.Join(dir, t.Study))
		}
		return out
	}
	b.Run("midsag-serve", func(b *testing.B) {
		dirs := studies(b, 90)
		s := startService(b, b.TempDir(), "--settle", "1h")
		b.ResetTimer()
		for i := 0; i < b.N; i++ {
			send(b, s.dicom, "MIDSAG", dirs[i])
		}
		b.StopTimer()
		s.terminate()
	})
	b.Run("storescp", func(b *testing.B) {
		dirs := studies(b, 90)
		port := freePort(b)
		_, p, _ := net.SplitHostPort(port)
		cmd := exec.Command(testtool.Command(b, "storescp"), "-aet", "DCMTKSCP", "-od", b.TempDir(), p)
		cmd.Env = append(os.Environ(), "TCP_NODELAY=1")
		var log bytes.Buffer
		cmd.Stdout, cmd.Stderr = &log, &log
		if err := cmd.Start(); err != nil {
			b.Fatal(err)
		}
		defer func() { cmd.Process.Kill(); cmd.Wait() }()
		for i := 0; i < 100; i++ {
			if c, err := net.Dial("tcp", port); err == nil {
				c.Close()
				break
			}
			time.Sleep(20 * time.Millisecond)
		}
		b.ResetTimer()
		for i := 0; i < b.N; i++ {
			send(b, port, "DCMTKSCP", dirs[i])
		}
	})
}
