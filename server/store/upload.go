package store

import (
	"context"
	"crypto/sha256"
	"encoding/hex"
	"errors"
	"fmt"
	"hash"
	"io"
	"os"
	"path"
	"path/filepath"
	"time"
)

// Upload is one instance on its way into the store. Its bytes are written
// (streamed, never held whole) to a temporary file in the spool folder and
// hashed on the way; PutUpload makes it durable. The caller defers Abort,
// which does nothing once PutUpload has taken the file. Open removes
// temporary files a crash left, so an upload that was never put is never
// kept.
type Upload interface {
	io.Writer
	// ReaderAt reads back what was written, for the header parser.
	io.ReaderAt
	// Size is the number of bytes written so far.
	Size() int64
	// Park closes the file while the upload waits for PutUpload, so a
	// request staging thousands of instances holds no descriptor for
	// each; ReadAt and PutUpload reopen it.
	Park() error
	// Abort removes the temporary file.
	Abort()
}

// spoolUpload is the Store's Upload.
type spoolUpload struct {
	f *os.File
	// name is the temporary file's path; f is nil while parked.
	name string
	h    hash.Hash
	n    int64
	err  error
	done bool
}

// NewUpload starts an upload in the spool folder.
func (s *Store) NewUpload() (Upload, error) {
	f, err := os.CreateTemp(s.spool, ".upload-*"+tmpSuffix)
	if err != nil {
		return nil, fmt.Errorf("store: start upload: %w", err)
	}
	return &spoolUpload{f: f, name: f.Name(), h: sha256.New()}, nil
}

func (u *spoolUpload) Write(p []byte) (int, error) {
	if u.done || u.f == nil {
		return 0, fmt.Errorf("store: upload: %w", os.ErrClosed)
	}
	n, err := u.f.Write(p)
	u.h.Write(p[:n])
	u.n += int64(n)
	if err != nil && u.err == nil {
		u.err = err
	}
	return n, err
}

func (u *spoolUpload) ReadAt(p []byte, off int64) (int, error) {
	if err := u.reopen(); err != nil {
		return 0, err
	}
	return u.f.ReadAt(p, off)
}

func (u *spoolUpload) Park() error {
	if u.done || u.f == nil {
		return nil
	}
	err := u.f.Close()
	u.f = nil
	if err != nil && u.err == nil {
		u.err = err
	}
	return err
}

// reopen opens a parked upload's file again.
func (u *spoolUpload) reopen() error {
	if u.done {
		return fmt.Errorf("store: upload: %w", os.ErrClosed)
	}
	if u.f != nil {
		return nil
	}
	f, err := os.OpenFile(u.name, os.O_RDWR, 0)
	if err != nil {
		return fmt.Errorf("store: reopen upload: %w", err)
	}
	u.f = f
	return nil
}

func (u *spoolUpload) Size() int64 { return u.n }

func (u *spoolUpload) Abort() {
	if u.done {
		return
	}
	u.done = true
	if u.f != nil {
		u.f.Close()
	}
	os.Remove(u.name)
}

// sum returns the hex SHA-256 of the bytes written.
func (u *spoolUpload) sum() string { return hex.EncodeToString(u.h.Sum(nil)) }

// moveTo makes the upload's file durable and renames it to dst; the
// folder's fsync is the committer's. On failure the file is removed.
func (u *spoolUpload) moveTo(dst string) error {
	if err := u.reopen(); err != nil {
		u.Abort()
		return err
	}
	u.done = true
	tmp := u.name
	err := u.err
	if err == nil {
		err = u.f.Sync()
	}
	if cerr := u.f.Close(); err == nil {
		err = cerr
	}
	if err == nil {
		err = os.Rename(tmp, dst)
	}
	if err != nil {
		os.Remove(tmp)
		return fmt.Errorf("store: spool %s: %w", filepath.Base(dst), err)
	}
	return nil
}

// Put makes one instance held in memory durable: PutUpload of its bytes.
func (s *Store) Put(ctx context.Context, inst Instance, data []byte) (Instance, bool, error) {
	u, err := s.NewUpload()
	if err != nil {
		return Instance{}, false, err
	}
	defer u.Abort()
	if _, err := u.Write(data); err != nil {
		return Instance{}, false, fmt.Errorf("store: put: %w", err)
	}
	return s.PutUpload(ctx, inst, u)
}

// PutUpload makes one instance durable. It returns only after the bytes are
// in dir/spool/<study-hash>/<sop-hash>-<sha256>.dcm (fsynced, renamed,
// folder fsynced) and the instance's row is committed. It fills Seq, Size,
// SHA256, ReceivedAt and Path. u must come from this Store's NewUpload.
//
// Re-sending a SOP Instance UID with identical bytes returns the stored
// instance with duplicate=true and keeps nothing new. With different bytes
// the new file and row replace the old ones under a new Seq; the old file is
// removed only after the new row committed, so a crash keeps one complete
// version. The file name carries the content hash for that reason: the new
// version never overwrites the acknowledged one in place.
func (s *Store) PutUpload(ctx context.Context, inst Instance, up Upload) (Instance, bool, error) {
	u, ok := up.(*spoolUpload)
	if !ok || u.done {
		return Instance{}, false, errors.New("store: put: not an open upload of this store")
	}
	if inst.StudyInstanceUID == "" || inst.SOPInstanceUID == "" {
		return Instance{}, false, errors.New("store: put: study and SOP instance UIDs are required")
	}
	if err := s.enter(); err != nil {
		return Instance{}, false, err
	}
	defer s.puts.Done()

	lock := s.sopLock(inst.SOPInstanceUID)
	lock.Lock()
	defer lock.Unlock()
	if err := ctx.Err(); err != nil {
		return Instance{}, false, fmt.Errorf("store: put: %w", err)
	}

	inst.SHA256 = u.sum()
	old, found, err := s.instanceBySOP(ctx, inst.SOPInstanceUID)
	if err != nil {
		return Instance{}, false, err
	}
	if found && old.SHA256 == inst.SHA256 {
		u.Abort()
		return old, true, nil
	}
	// Cheap early refusal so a full study costs no rename; commit checks
	// again inside the transaction, where concurrent Puts are serialised.
	if !found || old.StudyInstanceUID != inst.StudyInstanceUID {
		n, err := s.studyCount(ctx, inst.StudyInstanceUID)
		if err != nil {
			return Instance{}, false, err
		}
		if n >= s.opts.MaxInstancesPerStudy {
			return Instance{}, false, ErrStudyFull
		}
	}

	s.inflight.Add(1)
	defer s.inflight.Add(-1)

	inst.Size = u.n
	inst.ReceivedAt = time.Now().UTC()
	studyDir := uidHash(inst.StudyInstanceUID)
	name := uidHash(inst.SOPInstanceUID) + "-" + inst.SHA256 + ".dcm"
	inst.Path = path.Join("spool", studyDir, name)
	dir := filepath.Join(s.spool, studyDir)
	if err := s.ensureDir(dir); err != nil {
		return Instance{}, false, err
	}
	// The folder's fsync is the committer's, once per folder per batch,
	// before the rows commit.
	if err := u.moveTo(filepath.Join(dir, name)); err != nil {
		return Instance{}, false, err
	}
	return s.commitOne(&putReq{inst: inst, dir: dir})
}

// commitOne commits one request's row, alone or in the committer's batch.
func (s *Store) commitOne(req *putReq) (Instance, bool, error) {
	if s.reqs == nil {
		s.commit([]*putReq{req})
	} else {
		// Once queued, wait for the outcome whatever ctx says: returning
		// early would leave a row the caller was told had failed.
		req.done = make(chan struct{})
		s.reqs <- req
		<-req.done
	}
	if req.err != nil {
		return Instance{}, false, req.err
	}
	return req.inst, false, nil
}
