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
