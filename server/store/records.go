package store

import (
	"context"
	"crypto/rand"
	"database/sql"
	"encoding/base64"
	"encoding/hex"
	"encoding/json"
	"errors"
	"fmt"
	"strconv"
	"strings"
	"time"
)

// Page sizes for ListRecords.
const (
	defaultPageSize = 50
	maxPageSize     = 500
)

func validStatus(s string) bool {
	switch s {
	case StatusPending, StatusRunning, StatusDone, StatusRejected, StatusFailed:
		return true
	}
	return false
}

const recordColumns = `id, study_uid, version, status, reason, message, model_name, model_version,
	explain, sop_uids, covered_seq, result_json, created_at, finished_at`

func scanRecord(sc interface{ Scan(...any) error }) (Record, error) {
	var r Record
	var sops string
	var created, finished int64
	err := sc.Scan(&r.ID, &r.StudyInstanceUID, &r.Version, &r.Status, &r.Reason, &r.Message,
		&r.ModelName, &r.ModelVersion, &r.Explain, &sops, &r.CoveredSeq, &r.ResultJSON,
		&created, &finished)
	if err != nil {
		return Record{}, err
	}
	if err := json.Unmarshal([]byte(sops), &r.SOPInstanceUIDs); err != nil {
		return Record{}, fmt.Errorf("record %s: SOP instance UIDs: %w", r.ID, err)
	}
	if len(r.SOPInstanceUIDs) == 0 {
		r.SOPInstanceUIDs = nil
	}
	r.CreatedAt = fromNanos(created)
	r.FinishedAt = fromNanos(finished)
	return r, nil
}

// CreateRecord stores a new record and returns it with ID (32 hex
// characters from crypto/rand), Version (one more than the study's newest,
// counted in the same transaction) and CreatedAt set. An empty Status means
// pending.
func (s *Store) CreateRecord(ctx context.Context, r Record) (Record, error) {
	if r.StudyInstanceUID == "" {
		return Record{}, errors.New("store: create record: study instance UID is required")
	}
	if r.Status == "" {
		r.Status = StatusPending
	}
	if !validStatus(r.Status) {
		return Record{}, fmt.Errorf("store: create record: unknown status %q", r.Status)
	}
	var id [16]byte
	if _, err := rand.Read(id[:]); err != nil {
		return Record{}, fmt.Errorf("store: create record: id: %w", err)
	}
	r.ID = hex.EncodeToString(id[:])
	r.CreatedAt = time.Now().UTC()
	// Whole-study records are stored as "[]" so DueStudies can tell them
	// apart with one comparison.
	sops := []string{}
	if len(r.SOPInstanceUIDs) > 0 {
		sops = r.SOPInstanceUIDs
	}
	sopJSON, err := json.Marshal(sops)
	if err != nil {
		return Record{}, fmt.Errorf("store: create record: %w", err)
	}
	tx, err := s.w.BeginTx(ctx, nil)
	if err != nil {
		return Record{}, fmt.Errorf("store: create record: begin: %w", err)
	}
	defer tx.Rollback()
	err = tx.QueryRowContext(ctx, `SELECT COALESCE(MAX(version), 0) + 1 FROM records WHERE study_uid = ?`,
		r.StudyInstanceUID).Scan(&r.Version)
	if err != nil {
		return Record{}, fmt.Errorf("store: create record: version: %w", err)
	}
	_, err = tx.ExecContext(ctx, `INSERT INTO records (`+recordColumns+`)
		VALUES (?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?)`,
		r.ID, r.StudyInstanceUID, r.Version, r.Status, r.Reason, r.Message, r.ModelName,
		r.ModelVersion, r.Explain, string(sopJSON), r.CoveredSeq, r.ResultJSON,
		toNanos(r.CreatedAt), toNanos(r.FinishedAt))
	if err != nil {
		return Record{}, fmt.Errorf("store: create record: insert: %w", err)
	}
	if err := tx.Commit(); err != nil {
		return Record{}, fmt.Errorf("store: create record: commit: %w", err)
	}
	return r, nil
}

// UpdateRecord stores a record's status, reason, message, model, result
// JSON and finish time. It returns ErrNotFound for an unknown ID.
func (s *Store) UpdateRecord(ctx context.Context, r Record) error {
	if !validStatus(r.Status) {
		return fmt.Errorf("store: update record %s: unknown status %q", r.ID, r.Status)
	}
	res, err := s.w.ExecContext(ctx, `UPDATE records SET status = ?, reason = ?, message = ?,
		model_name = ?, model_version = ?, result_json = ?, finished_at = ? WHERE id = ?`,
		r.Status, r.Reason, r.Message, r.ModelName, r.ModelVersion, r.ResultJSON,
		toNanos(r.FinishedAt.UTC()), r.ID)
	if err != nil {
		return fmt.Errorf("store: update record %s: %w", r.ID, err)
	}
	n, err := res.RowsAffected()
	if err != nil {
		return fmt.Errorf("store: update record %s: %w", r.ID, err)
	}
	if n == 0 {
		return fmt.Errorf("store: update record %s: %w", r.ID, ErrNotFound)
	}
	return nil
}

// Record returns one record by ID, or ErrNotFound.
func (s *Store) Record(ctx context.Context, id string) (Record, error) {
	r, err := scanRecord(s.r.QueryRowContext(ctx, `SELECT `+recordColumns+` FROM records WHERE id = ?`, id))
	if errors.Is(err, sql.ErrNoRows) {
		return Record{}, fmt.Errorf("store: record %s: %w", id, ErrNotFound)
	}
	if err != nil {
		return Record{}, fmt.Errorf("store: record %s: %w", id, err)
	}
	return r, nil
}

func (s *Store) queryRecords(ctx context.Context, query string, args ...any) ([]Record, error) {
	rows, err := s.r.QueryContext(ctx, query, args...)
	if err != nil {
		return nil, err
	}
	defer rows.Close()
	var out []Record
	for rows.Next() {
		r, err := scanRecord(rows)
		if err != nil {
			return nil, err
		}
		out = append(out, r)
	}
	return out, rows.Err()
}

// ListRecords returns records matching q's study and status, newest first
// (CreatedAt, then ID, both descending), and the token of the next page ("" on
// the last page). The token is opaque to callers.
func (s *Store) ListRecords(ctx context.Context, q Query) ([]Record, string, error) {
	size := q.PageSize
	if size <= 0 {
		size = defaultPageSize
	}
	size = min(size, maxPageSize)
	where := []string{"1"}
	var args []any
	if q.StudyInstanceUID != "" {
		where = append(where, "study_uid = ?")
		args = append(args, q.StudyInstanceUID)
	}
	if q.Status != "" {
		where = append(where, "status = ?")
		args = append(args, q.Status)
	}
	if q.PageToken != "" {
		created, id, err := decodeToken(q.PageToken)
		if err != nil {
			return nil, "", err
		}
		where = append(where, "(created_at, id) < (?, ?)")
		args = append(args, created, id)
	}
	// One row more than the page tells whether another page exists without
	// handing out a token that leads to an empty page.
	args = append(args, size+1)
	out, err := s.queryRecords(ctx, `SELECT `+recordColumns+` FROM records WHERE `+
		strings.Join(where, " AND ")+` ORDER BY created_at DESC, id DESC LIMIT ?`, args...)
	if err != nil {
		return nil, "", fmt.Errorf("store: list records: %w", err)
	}
	if len(out) <= size {
		return out, "", nil
	}
	out = out[:size]
	last := out[size-1]
	return out, encodeToken(toNanos(last.CreatedAt), last.ID), nil
}

func encodeToken(created int64, id string) string {
	return base64.RawURLEncoding.EncodeToString([]byte(strconv.FormatInt(created, 10) + ":" + id))
}

func decodeToken(tok string) (int64, string, error) {
	b, err := base64.RawURLEncoding.DecodeString(tok)
	if err != nil {
		return 0, "", fmt.Errorf("store: bad page token: %w", err)
	}
	c, id, ok := strings.Cut(string(b), ":")
	if !ok {
		return 0, "", errors.New("store: bad page token")
	}
	created, err := strconv.ParseInt(c, 10, 64)
	if err != nil {
		return 0, "", fmt.Errorf("store: bad page token: %w", err)
	}
	return created, id, nil
}

// Unfinished returns pending and running records, oldest first. After a
// restart the running ones were interrupted and need to run again.
func (s *Store) Unfinished(ctx context.Context) ([]Record, error) {
	out, err := s.queryRecords(ctx, `SELECT `+recordColumns+` FROM records
		WHERE status IN ('pending', 'running') ORDER BY created_at, id`)
	if err != nil {
		return nil, fmt.Errorf("store: unfinished records: %w", err)
	}
	return out, nil
}
