package server

import (
	"bytes"
	"context"
	"errors"
	"fmt"
	"io"
	"sync"

	"github.com/midsag/midsag"
	"github.com/midsag/midsag/server/store"
)

// Upload is a temporary file in the store's spool (store.Upload): an
// instance on its way in, or an uploaded archive that needs random access.
type Upload = store.Upload

// ingestBuffer is the one buffer an instance in flight holds while it is
// copied to its spool file. Our choice: large enough that the copy makes
// few system calls, small enough that hundreds of uploads fit in the
// default budget.
const ingestBuffer = 256 << 10

// DefaultInflightBytes bounds the buffers of all instances in flight
// together when Config.InflightBytes is zero: 256 instances at once. Our
// choice.
const DefaultInflightBytes = 64 << 20

// bufPool recycles ingest buffers.
var bufPool = sync.Pool{New: func() any { b := make([]byte, ingestBuffer); return &b }}

// Staged is one instance received into the spool whose header has been
// read, not yet stored: Commit stores it, Abort discards it. A request
// that must store all or nothing stages every instance first.
type Staged struct {
	// Stored names the instance (Duplicate is not known yet).
	Stored
	origin Origin
	inst   store.Instance
	up     Upload
}

// Abort discards a staged instance; it does nothing once committed, so it
// can be deferred.
func (s *Staged) Abort() {
	if s != nil && s.up != nil {
		s.up.Abort()
		s.up = nil
	}
}

// NewUpload returns a temporary file in the store's spool, for an upload
// (such as a zip archive) that must be on disk before it can be read. It
// is removed by Abort, or at the next start after a crash.
func (c *Core) NewUpload() (Upload, error) {
	u, err := c.cfg.Store.NewUpload()
	if err != nil {
		return nil, fmt.Errorf("spool upload: %w", err)
	}
	return u, nil
}

// Ingest parses the instance's header and stores it durably.
func (c *Core) Ingest(ctx context.Context, origin Origin, data []byte) (Stored, error) {
	return c.IngestFrom(ctx, origin, bytes.NewReader(data), 0)
}

// IngestFrom streams one instance from r (at most limit bytes when limit
// > 0) into the spool and stores it durably: Receive, then Commit.
func (c *Core) IngestFrom(ctx context.Context, origin Origin, r io.Reader, limit int64) (Stored, error) {
	st, err := c.Receive(ctx, origin, r, limit)
	if err != nil {
		if st != nil {
			return st.Stored, err
		}
		return Stored{}, err
	}
	return c.Commit(ctx, st)
}

// Receive streams one instance from r into a spool file, hashing it on the
// way, and reads its header from there; the instance holds one small
// buffer taken from the Core's in-flight budget, whatever its size. More
// than limit bytes (when limit > 0) is refused as too_large. Nothing is
// stored until Commit. A refusal after the header was read returns a
// Staged naming the instance, already aborted.
func (c *Core) Receive(ctx context.Context, origin Origin, r io.Reader, limit int64) (*Staged, error) {
	// The buffer is taken before the spool file, so instances waiting for
	// one hold no file either.
	if err := c.budget.Acquire(ctx, ingestBuffer); err != nil {
		return nil, fmt.Errorf("wait for an ingest buffer: %w", err)
	}
	defer c.budget.Release(ingestBuffer)
	u, err := c.cfg.Store.NewUpload()
	if err != nil {
		return nil, fmt.Errorf("spool instance: %w", err)
	}
	st := &Staged{origin: origin, up: u}
	if err := copyIn(u, r, limit); err != nil {
		st.Abort()
		return nil, err
	}
	// Headers only: the pixels are decoded when the study is scored, from
	// the spool.
	size := u.Size()
	inst, err := c.cfg.Pre.ReadHeader(origin.Listener, io.NewSectionReader(u, 0, size), size)
	if err != nil {
		st.Abort()
		return nil, err
	}
	st.Stored = Stored{StudyInstanceUID: inst.StudyInstanceUID, SeriesInstanceUID: inst.SeriesInstanceUID,
		SOPInstanceUID: inst.SOPInstanceUID, SOPClassUID: inst.SOPClassUID}
	if inst.StudyInstanceUID == "" || inst.SeriesInstanceUID == "" {
		st.Abort()
		return nil, midsag.Rejectf(midsag.ReasonNotDICOM, "instance has no Study or Series Instance UID")
	}
	if origin.Study != "" && inst.StudyInstanceUID != origin.Study {
		st.Abort()
		return st, midsag.Rejectf(midsag.ReasonMultipleStudies, "instance of another study than the request's")
	}
	// The study is busy from the moment one of its headers is read, so
	// a request stored at its end does not look quiet until then.
	c.touch(inst.StudyInstanceUID)
	st.inst = store.Instance{
		StudyInstanceUID:  inst.StudyInstanceUID,
		SeriesInstanceUID: inst.SeriesInstanceUID,
		SOPInstanceUID:    inst.SOPInstanceUID,
		SOPClassUID:       inst.SOPClassUID,
		TransferSyntaxUID: inst.TransferSyntaxUID,
		Origin:            origin.Listener,
		CallingAE:         origin.CallingAE,
		Remote:            origin.Remote,
	}
	if err := u.Park(); err != nil {
		st.Abort()
		return nil, fmt.Errorf("spool instance: %w", err)
	}
	return st, nil
}

// copyIn copies r to u through one pooled buffer, which the caller holds
// from the in-flight budget.
func copyIn(u Upload, r io.Reader, limit int64) error {
	bp := bufPool.Get().(*[]byte)
	defer bufPool.Put(bp)
	// Wrapped so a WriterTo (bufio.Reader's, with its small buffer)
	// cannot replace the budgeted buffer.
	src := io.Reader(struct{ io.Reader }{r})
	if limit > 0 {
		src = io.LimitReader(r, limit+1)
	}
	n, err := io.CopyBuffer(writerOnly{u}, src, *bp)
	if err != nil {
		var we writeError
		if errors.As(err, &we) {
			return fmt.Errorf("spool instance: %w", we.err)
		}
		return err
	}
	if limit > 0 && n > limit {
		return midsag.Rejectf(midsag.ReasonTooLarge, "an instance is larger than the %d-byte limit", limit)
	}
	if n == 0 {
		return midsag.Rejectf(midsag.ReasonNoInput, "the instance is empty")
	}
	return nil
}

// writerOnly hides the upload's other methods from io.CopyBuffer (which
// would otherwise use ReadFrom, bypassing the budgeted buffer) and marks
// its errors, so a full disk is not mistaken for a broken body.
type writerOnly struct{ w io.Writer }

func (w writerOnly) Write(p []byte) (int, error) {
	n, err := w.w.Write(p)
	if err != nil {
		return n, writeError{err}
	}
	return n, nil
}

// writeError is a failure to write the spool file.
type writeError struct{ err error }

func (e writeError) Error() string { return e.err.Error() }

// Commit stores a staged instance durably (spool file and row) and returns
// it; the staged instance is used up either way.
func (c *Core) Commit(ctx context.Context, st *Staged) (Stored, error) {
	if st == nil || st.up == nil {
		return Stored{}, errors.New("commit: the instance is not staged")
	}
	up := st.up
	st.up = nil
	defer up.Abort()
	rec, dup, err := c.cfg.Store.PutUpload(ctx, st.inst, up)
	if errors.Is(err, store.ErrStudyFull) {
		return st.Stored, midsag.Reject(midsag.ReasonTooLarge, "the study has reached the instance limit", err)
	}
	if err != nil {
		return st.Stored, fmt.Errorf("store instance: %w", err)
	}
	c.cfg.Metrics.instanceStored(st.origin.Listener)
	c.touch(rec.StudyInstanceUID)
	return Stored{
		StudyInstanceUID:  rec.StudyInstanceUID,
		SeriesInstanceUID: rec.SeriesInstanceUID,
		SOPInstanceUID:    rec.SOPInstanceUID,
		SOPClassUID:       rec.SOPClassUID,
		Duplicate:         dup,
	}, nil
}
