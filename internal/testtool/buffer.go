package testtool

import (
	"bytes"
	"sync"
)

// Buffer collects output written from other goroutines, such as a child
// process's stdout and stderr copied by os/exec or a logger shared by
// workers, while the test reads it. A bytes.Buffer alone is a data race
// there.
type Buffer struct {
	mu  sync.Mutex
	buf bytes.Buffer
}

// Write appends p.
func (b *Buffer) Write(p []byte) (int, error) {
	b.mu.Lock()
	defer b.mu.Unlock()
	return b.buf.Write(p)
}

// String returns everything written so far.
func (b *Buffer) String() string {
	b.mu.Lock()
	defer b.mu.Unlock()
	return b.buf.String()
}
