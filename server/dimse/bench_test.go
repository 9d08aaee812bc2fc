package dimse

import (
	"context"
	"fmt"
	"os"
	"path/filepath"
	"strings"
	"sync/atomic"
	"testing"

	"github.com/midsag/midsag"
)

// durableHandler writes each instance as the lead's store will: temp
// file, fsync, rename, into dir, before answering success.
func durableHandler(dir string) StoreHandler {
	var n atomic.Int64
	return func(_ context.Context, _ Association, part10 []byte) Status {
		name := filepath.Join(dir, fmt.Sprintf("%06d.dcm", n.Add(1)))
		f, err := os.CreateTemp(dir, ".tmp-*")
		if err != nil {
			return Status{Code: StatusOutOfResources}
		}
		_, werr := f.Write(part10)
		serr := f.Sync()
		cerr := f.Close()
		if werr != nil || serr != nil || cerr != nil || os.Rename(f.Name(), name) != nil {
			os.Remove(f.Name())
			return Status{Code: StatusOutOfResources}
		}
		return Status{Code: StatusSuccess}
	}
}

// BenchmarkStorescu times DCMTK storescu sending one phantom study
// (Explicit VR Little Endian) to our SCP with a durable handler and to
// DCMTK's storescp -od, in the same run, both with TCP_NODELAY=1;
// bench/storescu.sh prints the ratio of the two ns/op.
func BenchmarkStorescu(b *testing.B) {
	dir, files := studyDir(b, 5, midsag.ExplicitVRLittleEndian)
	b.Logf("%d files", len(files))
	run := func(b *testing.B, port, called string) {
		for b.Loop() {
			out, err := dcmtk(b, "storescu", "-aet", "BENCH", "-aec", called, "+sd", "127.0.0.1", port, dir)
			if err != nil {
				b.Fatalf("storescu: %v\n%s", err, out)
			}
		}
	}
	b.Run("midsag", func(b *testing.B) {
		_, _, port := startSCP(b, Config{}, durableHandler(b.TempDir()))
		run(b, port, "MIDSAG")
	})
	// Without fsync: what the protocol costs apart from durability.
	b.Run("midsag-nofsync", func(b *testing.B) {
		_, _, port := startSCP(b, Config{}, func(context.Context, Association, []byte) Status { return Status{Code: StatusSuccess} })
		run(b, port, "MIDSAG")
	})
	b.Run("storescp", func(b *testing.B) {
		addr, _ := startStorescp(b)
		_, port, _ := strings.Cut(addr, "127.0.0.1:")
		run(b, port, "DCMTKSCP")
	})
}
