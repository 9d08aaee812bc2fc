package store

import (
	"context"
	"crypto/sha256"
	"database/sql"
	"encoding/hex"
	"errors"
	"fmt"
	"hash/fnv"
	"io"
	"os"
	"path"
	"path/filepath"
	"sync"
	"time"

	"github.com/midsag/midsag/internal/atomicfile"
)

// tmpSuffix marks files that were never renamed into place; Open removes them.
const tmpSuffix = atomicfile.TempSuffix

// putReq is one Put waiting for its row to commit.
type putReq struct {
	inst Instance
	// dir is the study folder whose entry for the new file must be synced
	// before the row commits.
	dir  string
	err  error
	done chan struct{}
}

// Put makes one instance durable. It returns only after the bytes are in
// dir/spool/<study-hash>/<sop-hash>-<sha256>.dcm (written to a temporary
// file, fsynced, renamed, folder fsynced) and the instance's row is
// committed. Put fills Seq, Size, SHA256, ReceivedAt and Path.
//
// Re-sending a SOP Instance UID with identical bytes returns the stored
// instance with duplicate=true and writes nothing. With different bytes the
// new file and row replace the old ones under a new Seq; the old file is
// removed only after the new row committed, so a crash keeps one complete
// version. The file name carries the content hash for that reason: the new
// version never overwrites the acknowledged one in place.
func (s *Store) Put(ctx context.Context, inst Instance, data []byte) (Instance, bool, error) {
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

	sum := sha256.Sum256(data)
	inst.SHA256 = hex.EncodeToString(sum[:])
	old, found, err := s.instanceBySOP(ctx, inst.SOPInstanceUID)
	if err != nil {
		return Instance{}, false, err
	}
	if found && old.SHA256 == inst.SHA256 {
		return old, true, nil
	}
	// Cheap early refusal so a full study costs no file write; commit checks
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

	inst.Size = int64(len(data))
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
	if err := atomicfile.WriteFile(filepath.Join(dir, name), data, atomicfile.SkipDirSync()); err != nil {
		return Instance{}, false, fmt.Errorf("store: %w", err)
	}

	req := &putReq{inst: inst, dir: dir}
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

func (s *Store) enter() error {
	s.mu.Lock()
	defer s.mu.Unlock()
	if s.closed {
		return ErrClosed
	}
	s.puts.Add(1)
	return nil
}

func (s *Store) sopLock(uid string) *sync.Mutex {
	h := fnv.New32a()
	io.WriteString(h, uid)
	return &s.sopLocks[h.Sum32()%uint32(len(s.sopLocks))]
}

// uidHash names spool folders and files after a UID without putting the
// UID itself (up to 64 characters of digits and dots, PS3.5 9.1) in a path:
// 128 bits of SHA-256 make collisions negligible.
func uidHash(uid string) string {
	sum := sha256.Sum256([]byte(uid))
	return hex.EncodeToString(sum[:16])
}

// ensureDir creates a study folder and makes its entry in spool/ durable
// before any row can point into it.
func (s *Store) ensureDir(dir string) error {
	if _, ok := s.dirs.Load(dir); ok {
		return nil
	}
	if err := os.MkdirAll(dir, 0o750); err != nil {
		return fmt.Errorf("store: create %s: %w", dir, err)
	}
	if err := syncDir(s.spool); err != nil {
		return err
	}
	s.dirs.Store(dir, struct{}{})
	return nil
}

// committer gathers Puts for up to GroupCommit and commits them together.
func (s *Store) committer() {
	defer close(s.done)
	for req := range s.reqs {
		batch := []*putReq{req}
		timer := time.NewTimer(s.opts.GroupCommit)
	gather:
		// Stop waiting as soon as every Put in flight has joined: the window
		// is for Puts that are coming, and a lone writer should not pay it.
		for len(batch) < maxBatch && int64(len(batch)) < s.inflight.Load() {
			select {
			case r, ok := <-s.reqs:
				if !ok {
					break gather
				}
				batch = append(batch, r)
			case <-timer.C:
				break gather
			}
		}
		timer.Stop()
		s.commit(batch)
		for _, r := range batch {
			close(r.done)
		}
	}
}

// commit syncs the batch's folders, then inserts its rows in one
// transaction. It sets each request's err; on success it fills Seq.
func (s *Store) commit(batch []*putReq) {
	fail := func(err error) {
		for _, r := range batch {
			if r.err == nil {
				r.err = err
			}
		}
	}
	synced := map[string]bool{}
	for _, r := range batch {
		if synced[r.dir] {
			continue
		}
		if err := syncDir(r.dir); err != nil {
			fail(err)
			s.removeNew(batch)
			return
		}
		synced[r.dir] = true
	}
	oldPaths, err := s.insertBatch(batch)
	if err != nil {
		fail(err)
		if !errors.Is(err, errCommit) {
			s.removeNew(batch)
		}
		// After a failed COMMIT the outcome is unknown; the files stay and
		// the next Open removes those no row points to.
		return
	}
	for _, r := range batch {
		if errors.Is(r.err, ErrStudyFull) {
			os.Remove(filepath.Join(s.dir, filepath.FromSlash(r.inst.Path)))
		}
	}
	// The replaced versions are no longer referenced. A failed removal
	// leaves an orphan that the next Open sweeps, so it is not an error.
	for _, p := range oldPaths {
		os.Remove(filepath.Join(s.dir, filepath.FromSlash(p)))
	}
}

// errCommit marks a failed COMMIT, after which the rows may or may not exist.
var errCommit = errors.New("commit")

// removeNew removes the batch's new files after its rows were rolled back.
func (s *Store) removeNew(batch []*putReq) {
	for _, r := range batch {
		os.Remove(filepath.Join(s.dir, filepath.FromSlash(r.inst.Path)))
	}
}

// insertBatch inserts the batch's rows, replacing older versions of the
// same SOP Instance UID, and returns the paths of the replaced files.
func (s *Store) insertBatch(batch []*putReq) ([]string, error) {
	ctx := context.Background()
	tx, err := s.w.BeginTx(ctx, nil)
	if err != nil {
		return nil, fmt.Errorf("store: begin put: %w", err)
	}
	defer tx.Rollback()
	var oldPaths []string
	for _, r := range batch {
		old, err := replaceRow(ctx, tx, r, s.opts.MaxInstancesPerStudy)
		if err != nil {
			return nil, err
		}
		if old != "" && old != r.inst.Path {
			oldPaths = append(oldPaths, old)
		}
	}
	if err := tx.Commit(); err != nil {
		return nil, fmt.Errorf("store: %w put: %w", errCommit, err)
	}
	return oldPaths, nil
}

// replaceRow inserts one row inside tx. A full study sets r.err and inserts
// nothing; any other error aborts the whole batch.
func replaceRow(ctx context.Context, tx *sql.Tx, r *putReq, limit int) (oldPath string, err error) {
	in := &r.inst
	var oldStudy string
	err = tx.QueryRowContext(ctx, `SELECT study_uid, path FROM instances WHERE sop_uid = ?`, in.SOPInstanceUID).Scan(&oldStudy, &oldPath)
	found := err == nil
	if err != nil && !errors.Is(err, sql.ErrNoRows) {
		return "", fmt.Errorf("store: look up %s: %w", in.SOPInstanceUID, err)
	}
	if !found || oldStudy != in.StudyInstanceUID {
		var n int
		err := tx.QueryRowContext(ctx, `SELECT COALESCE((SELECT n FROM studies WHERE study_uid = ?), 0)`, in.StudyInstanceUID).Scan(&n)
		if err != nil {
			return "", fmt.Errorf("store: count study: %w", err)
		}
		if n >= limit {
			r.err = ErrStudyFull
			return "", nil
		}
	}
	if found {
		if _, err := tx.ExecContext(ctx, `DELETE FROM instances WHERE sop_uid = ?`, in.SOPInstanceUID); err != nil {
			return "", fmt.Errorf("store: remove old version: %w", err)
		}
		if _, err := tx.ExecContext(ctx, `UPDATE studies SET n = n - 1 WHERE study_uid = ?; DELETE FROM studies WHERE study_uid = ? AND n <= 0`, oldStudy, oldStudy); err != nil {
			return "", fmt.Errorf("store: count old version: %w", err)
		}
	}
	res, err := tx.ExecContext(ctx, `INSERT INTO instances (study_uid, series_uid, sop_uid, sop_class_uid,
		transfer_syntax_uid, origin, calling_ae, remote, size, sha256, received_at, path)
		VALUES (?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?)`,
		in.StudyInstanceUID, in.SeriesInstanceUID, in.SOPInstanceUID, in.SOPClassUID,
		in.TransferSyntaxUID, in.Origin, in.CallingAE, in.Remote, in.Size, in.SHA256,
		in.ReceivedAt.UnixNano(), in.Path)
	if err != nil {
		return "", fmt.Errorf("store: insert %s: %w", in.SOPInstanceUID, err)
	}
	seq, err := res.LastInsertId()
	if err != nil {
		return "", fmt.Errorf("store: sequence of %s: %w", in.SOPInstanceUID, err)
	}
	in.Seq = seq
	_, err = tx.ExecContext(ctx, `INSERT INTO studies (study_uid, n, last_seq, last_received) VALUES (?, 1, ?, ?)
		ON CONFLICT (study_uid) DO UPDATE SET n = n + 1, last_seq = excluded.last_seq,
		last_received = MAX(last_received, excluded.last_received)`,
		in.StudyInstanceUID, seq, in.ReceivedAt.UnixNano())
	if err != nil {
		return "", fmt.Errorf("store: update study: %w", err)
	}
	return oldPath, nil
}
