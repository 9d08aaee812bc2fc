package preprocess

import (
	"bytes"
	"os"
	"testing"

	"github.com/midsag/midsag/internal/testtool"
)

// FuzzRead feeds arbitrary bytes to Read and Decode (each frame of a
// multi-frame instance): every outcome must be
// an instance or an error, never a panic. Seeds are the first 2 KB of
// pydicom's test files when present (whole files stall Go's fuzzing
// engine here at 0 executions per second; their headers are what matters).
// Run longer with: go test -run '^$' -fuzz FuzzRead ./preprocess
func FuzzRead(f *testing.F) {
	for _, name := range []string{"MR_small.dcm", "MR_small_RLE.dcm", "MR_small_bigendian.dcm", "MR_small_implicit.dcm", "image_dfl.dcm", "no_meta.dcm"} {
		if b, err := os.ReadFile(testtool.PydicomTestFiles + "/" + name); err == nil {
			f.Add(b[:min(len(b), 2048)])
		}
	}
	f.Add(part10File(elem(0x0008, 0x0018, "UI", []byte("1.2.3\x00"))))
	pre := New(Options{Lenient: true, Limits: Limits{MaxFileBytes: 1 << 20}})
	f.Fuzz(func(t *testing.T, data []byte) {
		inst, err := pre.Read("fuzz", bytes.NewReader(data))
		if err != nil {
			return
		}
		// Every frame of a multi-frame instance, as Group expands it.
		for _, fr := range inst.Frames() {
			_, _ = Decode(fr)
		}
	})
}
