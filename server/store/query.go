package store

import (
	"cmp"
	"context"
	"crypto/sha256"
	"database/sql"
	"encoding/hex"
	"errors"
	"fmt"
	"io"
	"io/fs"
	"os"
	"path/filepath"
	"slices"
	"strings"
	"time"

	"github.com/midsag/midsag/internal/atomicfile"
)

const instanceColumns = `seq, study_uid, series_uid, sop_uid, sop_class_uid, transfer_syntax_uid,
	origin, calling_ae, remote, size, sha256, received_at, path`

func scanInstance(sc interface{ Scan(...any) error }) (Instance, error) {
	var in Instance
	var received int64
	err := sc.Scan(&in.Seq, &in.StudyInstanceUID, &in.SeriesInstanceUID, &in.SOPInstanceUID,
		&in.SOPClassUID, &in.TransferSyntaxUID, &in.Origin, &in.CallingAE, &in.Remote,
		&in.Size, &in.SHA256, &received, &in.Path)
	in.ReceivedAt = fromNanos(received)
	return in, err
}

// fromNanos turns a stored UTC Unix time in nanoseconds into a time; 0 is
// the zero time.
func fromNanos(n int64) time.Time {
	if n == 0 {
		return time.Time{}
	}
	return time.Unix(0, n).UTC()
}

func toNanos(t time.Time) int64 {
	if t.IsZero() {
		return 0
	}
	return t.UnixNano()
}

func queryInstances(ctx context.Context, db *sql.DB, query string, args ...any) ([]Instance, error) {
	rows, err := db.QueryContext(ctx, query, args...)
	if err != nil {
		return nil, err
	}
	defer rows.Close()
	var out []Instance
	for rows.Next() {
		in, err := scanInstance(rows)
		if err != nil {
			return nil, err
		}
		out = append(out, in)
	}
	return out, rows.Err()
}

func (s *Store) instanceBySOP(ctx context.Context, sop string) (Instance, bool, error) {
	in, err := scanInstance(s.r.QueryRowContext(ctx, `SELECT `+instanceColumns+` FROM instances WHERE sop_uid = ?`, sop))
	if errors.Is(err, sql.ErrNoRows) {
		return Instance{}, false, nil
	}
	if err != nil {
		return Instance{}, false, fmt.Errorf("store: look up %s: %w", sop, err)
	}
	return in, true, nil
}

func (s *Store) studyCount(ctx context.Context, study string) (int, error) {
	var n int
	err := s.r.QueryRowContext(ctx, `SELECT COALESCE((SELECT n FROM studies WHERE study_uid = ?), 0)`, study).Scan(&n)
	if err != nil {
		return 0, fmt.Errorf("store: count study: %w", err)
	}
	return n, nil
}

// Instances lists the instances of a study with Seq <= maxSeq (all when
// maxSeq <= 0), in Seq order.
func (s *Store) Instances(ctx context.Context, studyUID string, maxSeq int64) ([]Instance, error) {
	out, err := queryInstances(ctx, s.r, `SELECT `+instanceColumns+` FROM instances
		WHERE study_uid = ? AND (? <= 0 OR seq <= ?) ORDER BY seq`, studyUID, maxSeq, maxSeq)
	if err != nil {
		return nil, fmt.Errorf("store: list instances of study: %w", err)
	}
	return out, nil
}

// sqlVarChunk keeps IN lists well below SQLite's host-parameter limit
// (SQLITE_MAX_VARIABLE_NUMBER, 32766 since 3.32.0; https://www.sqlite.org/limits.html).
const sqlVarChunk = 500

// InstancesBySOP returns the stored instances among sopUIDs, in Seq order;
// unknown UIDs are left out.
func (s *Store) InstancesBySOP(ctx context.Context, sopUIDs []string) ([]Instance, error) {
	var out []Instance
	for start := 0; start < len(sopUIDs); start += sqlVarChunk {
		chunk := sopUIDs[start:min(start+sqlVarChunk, len(sopUIDs))]
		args := make([]any, len(chunk))
		for i, u := range chunk {
			args[i] = u
		}
		part, err := queryInstances(ctx, s.r, `SELECT `+instanceColumns+` FROM instances
			WHERE sop_uid IN (?`+strings.Repeat(", ?", len(chunk)-1)+`) ORDER BY seq`, args...)
		if err != nil {
			return nil, fmt.Errorf("store: look up instances: %w", err)
		}
		out = append(out, part...)
	}
	if len(sopUIDs) > sqlVarChunk {
		slices.SortFunc(out, func(a, b Instance) int { return cmp.Compare(a.Seq, b.Seq) })
	}
	return out, nil
}

// Open opens an instance's spool file for reading, once its size and
// SHA-256 match those stored with its row; a mismatch or a missing file is
// ErrCorrupt.
func (s *Store) Open(inst Instance) (io.ReadCloser, error) {
	if !filepath.IsLocal(filepath.FromSlash(inst.Path)) || !strings.HasPrefix(inst.Path, "spool/") {
		return nil, fmt.Errorf("store: open: %q is not a spool path", inst.Path)
	}
	f, err := os.Open(filepath.Join(s.dir, filepath.FromSlash(inst.Path)))
	if errors.Is(err, fs.ErrNotExist) {
		return nil, fmt.Errorf("store: instance %s: spool file missing: %w", inst.SOPInstanceUID, ErrCorrupt)
	}
	if err != nil {
		return nil, fmt.Errorf("store: open instance %s: %w", inst.SOPInstanceUID, err)
	}
	if err := verify(f, inst); err != nil {
		f.Close()
		return nil, err
	}
	if _, err := f.Seek(0, io.SeekStart); err != nil {
		f.Close()
		return nil, fmt.Errorf("store: open instance %s: %w", inst.SOPInstanceUID, err)
	}
	return f, nil
}

// ErrCorrupt is returned when a spool file no longer holds the bytes its
// row recorded (size or SHA-256), or is missing.
var ErrCorrupt = errors.New("the spool file no longer holds the instance as stored")

// verify reads r whole and compares its size and SHA-256 with inst's.
func verify(r io.Reader, inst Instance) error {
	h := sha256.New()
	n, err := io.Copy(h, r)
	if err != nil {
		return fmt.Errorf("store: read instance %s: %w", inst.SOPInstanceUID, err)
	}
	if n != inst.Size {
		return fmt.Errorf("store: instance %s: %d bytes in the spool, %d stored: %w", inst.SOPInstanceUID, n, inst.Size, ErrCorrupt)
	}
	if got := hex.EncodeToString(h.Sum(nil)); got != inst.SHA256 {
		return fmt.Errorf("store: instance %s: sha256 %s, stored %s: %w", inst.SOPInstanceUID, got, inst.SHA256, ErrCorrupt)
	}
	return nil
}

// coveringStatuses are the statuses of whole-study records that cover their
// study up to CoveredSeq: a job that is queued, running or finished in any
// way will not be repeated for the same instances.
const coveringStatuses = `'pending', 'running', 'done', 'rejected', 'failed'`

// DueStudies lists studies whose newest instance arrived at or before
// quietSince and that hold an instance no whole-study record covers, that
// is whose LastSeq is above the newest CoveredSeq of the study's records
// created for the whole study (SOPInstanceUIDs empty). Records of direct
// requests for some instances do not cover the study.
func (s *Store) DueStudies(ctx context.Context, quietSince time.Time) ([]StudyState, error) {
	rows, err := s.r.QueryContext(ctx, `SELECT study_uid, last_seq, last_received, scored FROM (
		SELECT s.study_uid, s.last_seq, s.last_received,
			COALESCE((SELECT MAX(r.covered_seq) FROM records r
				WHERE r.study_uid = s.study_uid AND r.sop_uids = '[]'
				AND r.status IN (`+coveringStatuses+`)), 0) AS scored
		FROM studies s WHERE s.last_received <= ?)
		WHERE last_seq > scored ORDER BY last_received, study_uid`, quietSince.UnixNano())
	if err != nil {
		return nil, fmt.Errorf("store: due studies: %w", err)
	}
	defer rows.Close()
	var out []StudyState
	for rows.Next() {
		var st StudyState
		var last int64
		if err := rows.Scan(&st.StudyInstanceUID, &st.LastSeq, &last, &st.ScoredSeq); err != nil {
			return nil, fmt.Errorf("store: due studies: %w", err)
		}
		st.LastReceived = fromNanos(last)
		out = append(out, st)
	}
	if err := rows.Err(); err != nil {
		return nil, fmt.Errorf("store: due studies: %w", err)
	}
	return out, nil
}

// Stats counts what the store holds, for metrics.
type Stats struct {
	Instances int64
	Studies   int64
	// Records counts records by status.
	Records map[string]int64
}

// Stats counts instances, studies and records by status.
func (s *Store) Stats(ctx context.Context) (Stats, error) {
	st := Stats{Records: map[string]int64{}}
	err := s.r.QueryRowContext(ctx, `SELECT COUNT(*), COALESCE(SUM(n), 0) FROM studies`).Scan(&st.Studies, &st.Instances)
	if err != nil {
		return Stats{}, fmt.Errorf("store: count instances: %w", err)
	}
	rows, err := s.r.QueryContext(ctx, `SELECT status, COUNT(*) FROM records GROUP BY status`)
	if err != nil {
		return Stats{}, fmt.Errorf("store: count records: %w", err)
	}
	defer rows.Close()
	for rows.Next() {
		var status string
		var n int64
		if err := rows.Scan(&status, &n); err != nil {
			return Stats{}, fmt.Errorf("store: count records: %w", err)
		}
		st.Records[status] = n
	}
	if err := rows.Err(); err != nil {
		return Stats{}, fmt.Errorf("store: count records: %w", err)
	}
	return st, nil
}

// Ping proves the store is sound and can still write: it returns what
// PRAGMA quick_check found at Open, if anything, then writes, fsyncs and removes a
// probe file in the spool and commits a write transaction.
func (s *Store) Ping(ctx context.Context) error {
	if s.damaged != nil {
		return s.damaged
	}
	name := fmt.Sprintf(".ping-%d%s", time.Now().UnixNano(), tmpSuffix)
	if err := atomicfile.WriteFile(filepath.Join(s.spool, name), []byte("ping"), atomicfile.SkipDirSync()); err != nil {
		return fmt.Errorf("store: ping: %w", err)
	}
	if err := os.Remove(filepath.Join(s.spool, name)); err != nil {
		return fmt.Errorf("store: ping: remove probe: %w", err)
	}
	_, err := s.w.ExecContext(ctx, `INSERT INTO probe (id, at) VALUES (1, ?)
		ON CONFLICT (id) DO UPDATE SET at = excluded.at`, time.Now().UnixNano())
	if err != nil {
		return fmt.Errorf("store: ping: write transaction: %w", err)
	}
	return nil
}
