package cohort

import (
	"context"
	"database/sql"
	"encoding/json"
	"fmt"
	"net/url"
	"os"
	"path/filepath"
	"strings"

	_ "modernc.org/sqlite" // the "sqlite" database/sql driver, pure Go
)

// DBName is the SQLite file a batch keeps in its output folder: the header
// index of the cohort and every finished study's row.
const DBName = "batch.db"

// Ledger is a batch's database in its output folder: the header index of
// the cohort (which files hold which study, read once) and the row of
// every study scored, so a run resumes where it stopped. It is not the
// service's store (server/store, the spool and result versions). One
// process uses a folder at a time.
type Ledger struct {
	dir string
	db  *sql.DB
}

// Open opens (creating if needed) the ledger in dir.
func Open(dir string) (*Ledger, error) {
	if err := os.MkdirAll(dir, 0o755); err != nil {
		return nil, fmt.Errorf("cohort: %w", err)
	}
	// A file: URI needs an absolute path; a relative one does not open.
	abs, err := filepath.Abs(dir)
	if err != nil {
		return nil, fmt.Errorf("cohort: %w", err)
	}
	path := filepath.Join(abs, DBName)
	u := url.URL{Scheme: "file", Path: path}
	// synchronous=FULL: in WAL mode SQLite then syncs the WAL at every
	// commit, so a recorded row survives kill -9 and power loss
	// (https://www.sqlite.org/pragma.html#pragma_synchronous).
	dsn := u.String() + "?" + strings.Join([]string{"_txlock=immediate", "_pragma=journal_mode(WAL)",
		"_pragma=synchronous(FULL)", "_pragma=busy_timeout(10000)"}, "&")
	db, err := sql.Open("sqlite", dsn)
	if err != nil {
		return nil, fmt.Errorf("cohort: open %s: %w", path, err)
	}
	// One connection: writes are serialised anyway, and queries never run
	// while a write waits on them.
	db.SetMaxOpenConns(1)
	const schema = `
CREATE TABLE IF NOT EXISTS files (
	path  TEXT PRIMARY KEY, -- the file, or "file!entry" for a zip entry
	file  TEXT NOT NULL,
	entry TEXT NOT NULL,    -- zip entry name, or empty
	size  INTEGER NOT NULL,
	mtime INTEGER NOT NULL,
	study TEXT NOT NULL,
	reason TEXT NOT NULL,
	gen   INTEGER NOT NULL
);
CREATE INDEX IF NOT EXISTS files_study ON files(study);
CREATE TABLE IF NOT EXISTS results (
	study TEXT PRIMARY KEY,
	model_sha256 TEXT NOT NULL,
	row TEXT NOT NULL
);
CREATE TABLE IF NOT EXISTS state (key TEXT PRIMARY KEY, value INTEGER NOT NULL);`
	if _, err := db.Exec(schema); err != nil {
		db.Close()
		return nil, fmt.Errorf("cohort: create tables in %s: %w", path, err)
	}
	return &Ledger{dir: dir, db: db}, nil
}

// Close closes the database.
func (s *Ledger) Close() error { return s.db.Close() }

// put records a finished study's row; the commit is synced before it
// returns.
func (s *Ledger) put(ctx context.Context, r Row) error {
	b, err := json.Marshal(r)
	if err != nil {
		return fmt.Errorf("cohort: encode row: %w", err)
	}
	_, err = s.db.ExecContext(ctx, `INSERT OR REPLACE INTO results(study, model_sha256, row) VALUES(?, ?, ?)`,
		r.StudyInstanceUID, r.ModelSHA256, string(b))
	if err != nil {
		return fmt.Errorf("cohort: record study: %w", err)
	}
	return nil
}

// done returns the studies already recorded with the given model, but
// not those that failed on a runtime error (I/O, model), which a rerun
// tries again; rejected studies stay done, as their input would be
// rejected again.
func (s *Ledger) done(ctx context.Context, modelSHA string) (map[string]bool, error) {
	rows, err := s.db.QueryContext(ctx, `SELECT study FROM results WHERE model_sha256 = ? AND json_extract(row, '$.status') != 'failed'`, modelSHA)
	if err != nil {
		return nil, fmt.Errorf("cohort: read results: %w", err)
	}
	defer rows.Close()
	out := map[string]bool{}
	for rows.Next() {
		var uid string
		if err := rows.Scan(&uid); err != nil {
			return nil, fmt.Errorf("cohort: read results: %w", err)
		}
		out[uid] = true
	}
	return out, rows.Err()
}

// eachRow calls fn with each recorded row made with the model for the
// given studies, in Study Instance UID order.
func (s *Ledger) eachRow(ctx context.Context, modelSHA string, studies map[string]bool, fn func(Row) error) error {
	q, err := s.db.QueryContext(ctx, `SELECT study, row FROM results WHERE model_sha256 = ? ORDER BY study`, modelSHA)
	if err != nil {
		return fmt.Errorf("cohort: read results: %w", err)
	}
	defer q.Close()
	for q.Next() {
		var uid, js string
		if err := q.Scan(&uid, &js); err != nil {
			return fmt.Errorf("cohort: read results: %w", err)
		}
		if !studies[uid] {
			continue
		}
		var r Row
		if err := json.Unmarshal([]byte(js), &r); err != nil {
			return fmt.Errorf("cohort: decode row of study %s: %w", uid, err)
		}
		if err := fn(r); err != nil {
			return err
		}
	}
	return q.Err()
}
