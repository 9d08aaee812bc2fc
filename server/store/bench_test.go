package store

import (
	"context"
	"fmt"
	"path/filepath"
	"sync/atomic"
	"testing"
	"time"

	"github.com/midsag/midsag/internal/atomicfile"
)

// benchSize is a typical MR slice as DICOM: 512x512 16-bit pixels plus
// header is ~0.5 MiB, a 256x256 slice ~128 KiB (common practice for spine
// T2 sagittal protocols).
const benchSize = 128 << 10

// benchPut runs Puts from 8 goroutines, as listeners under load would.
func benchPut(b *testing.B, gc time.Duration) {
	s := openT(b, b.TempDir(), Options{GroupCommit: gc, MaxInstancesPerStudy: 1 << 30})
	data := payload("bench", 0, benchSize)
	var n atomic.Int64
	b.SetBytes(benchSize)
	b.SetParallelism(4) // 4 x GOMAXPROCS(2) = 8 goroutines
	b.ResetTimer()
	b.RunParallel(func(pb *testing.PB) {
		for pb.Next() {
			i := n.Add(1)
			// Distinct bytes per instance so none is a duplicate.
			data := append([]byte(fmt.Sprint(i)), data...)
			if _, _, err := s.Put(context.Background(), inst("1.2.3", fmt.Sprint("1.2.3.", i)), data); err != nil {
				b.Error(err)
				return
			}
		}
	})
}

// BenchmarkPutGroupCommit: Puts sharing transactions within 2 ms.
func BenchmarkPutGroupCommit(b *testing.B) { benchPut(b, 2*time.Millisecond) }

// BenchmarkPutNoGroup: one transaction per Put.
func BenchmarkPutNoGroup(b *testing.B) { benchPut(b, 0) }

// BenchmarkWriteFsyncOnly is the floor: the same files written, fsynced,
// renamed and their folder fsynced, with no database, so Put's overhead
// reads as a ratio against it.
func BenchmarkWriteFsyncOnly(b *testing.B) {
	dir := filepath.Join(b.TempDir(), "spool")
	s := &Store{spool: filepath.Dir(dir)}
	if err := s.ensureDir(dir); err != nil {
		b.Fatal(err)
	}
	data := payload("bench", 0, benchSize)
	var n atomic.Int64
	b.SetBytes(benchSize)
	b.SetParallelism(4)
	b.ResetTimer()
	b.RunParallel(func(pb *testing.PB) {
		for pb.Next() {
			i := n.Add(1)
			if err := atomicfile.WriteFile(filepath.Join(dir, fmt.Sprint(i, ".dcm")), data, atomicfile.SkipDirSync()); err != nil {
				b.Error(err)
				return
			}
			if err := syncDir(dir); err != nil {
				b.Error(err)
				return
			}
		}
	})
}
