package store

import (
	"context"
	"database/sql"
	"errors"
	"fmt"
	"net/url"
	"os"
	"path"
	"path/filepath"
	"strings"
	"sync"
	"sync/atomic"
	"syscall"
	"time"

	_ "modernc.org/sqlite" // registers the "sqlite" driver

	"github.com/midsag/midsag/internal/atomicfile"
)

// Options tunes a Store. The zero value is usable.
type Options struct {
	// GroupCommit, when > 0, lets concurrent Puts arriving within this
	// window share one SQLite transaction and one fsync per spool folder
	// (each spool file is still fsynced before its row commits); 0 means
	// one transaction per Put.
	GroupCommit time.Duration
	// MaxInstancesPerStudy bounds a study; 0 means 10000. A Put beyond it
	// fails with ErrStudyFull.
	MaxInstancesPerStudy int
}

// defaultMaxInstances bounds a study when Options leaves it zero: well above
// any spine MRI study (a few hundred images) yet small enough that one
// runaway sender cannot fill the disk with one study (common practice).
const defaultMaxInstances = 10000

// maxBatch caps one group commit so a burst cannot hold the writer for long.
const maxBatch = 256

// ErrStudyFull is returned by Put when the study already holds
// Options.MaxInstancesPerStudy instances.
var ErrStudyFull = errors.New("study has reached its instance limit")

// ErrClosed is returned by Put after Close.
var ErrClosed = errors.New("store is closed")

// Store is the spool folder and SQLite database of one service. Its methods
// are safe for concurrent use; only one process may open a folder at a time.
type Store struct {
	dir   string
	spool string
	opts  Options
	// w is the only connection that writes: SQLite admits one writer, and
	// queuing in database/sql is cheaper than SQLITE_BUSY retries.
	w *sql.DB
	// r serves reads, which in WAL mode run beside the writer.
	r *sql.DB

	// sopLocks serialise Puts of the same SOP Instance UID so duplicate
	// detection and replacement see each other's committed rows.
	sopLocks [256]sync.Mutex
	// dirs holds study folders whose entry in spool/ is known durable.
	dirs sync.Map

	reqs     chan *putReq
	inflight atomic.Int64
	done     chan struct{}

	mu     sync.Mutex
	closed bool
	puts   sync.WaitGroup
	// lock holds the folder's flock for the store's lifetime.
	lock *os.File
	// damaged is what PRAGMA quick_check found at Open (nil: nothing).
	damaged error
}

// Open opens or creates the store in dir: dir/spool/ for instance files and
// dir/midsag.db for rows. It applies pending schema migrations and removes
// what a crash left behind in the spool (temporary files and files no row
// points to), none of which was ever acknowledged.
func Open(dir string, opts Options) (*Store, error) {
	if opts.MaxInstancesPerStudy <= 0 {
		opts.MaxInstancesPerStudy = defaultMaxInstances
	}
	// An absolute path keeps the SQLite file: URI valid for relative
	// folders such as the default ./midsag-data.
	dir, err := filepath.Abs(dir)
	if err != nil {
		return nil, fmt.Errorf("store: %w", err)
	}
	spool := filepath.Join(dir, "spool")
	if err := os.MkdirAll(spool, 0o750); err != nil {
		return nil, fmt.Errorf("store: create spool: %w", err)
	}
	// One process per store: a second one would clean the spool under the
	// first one's feet. flock(2) is released by the kernel when the
	// holder dies, so a crash never leaves the folder locked.
	lock, err := os.OpenFile(filepath.Join(dir, "LOCK"), os.O_CREATE|os.O_RDWR, 0o640)
	if err != nil {
		return nil, fmt.Errorf("store: open lock file: %w", err)
	}
	if err := syscall.Flock(int(lock.Fd()), syscall.LOCK_EX|syscall.LOCK_NB); err != nil {
		lock.Close()
		if errors.Is(err, syscall.EWOULDBLOCK) {
			return nil, fmt.Errorf("store: %s: %w", dir, ErrLocked)
		}
		return nil, fmt.Errorf("store: lock %s: %w", dir, err)
	}
	opened := false
	defer func() {
		if !opened {
			lock.Close()
		}
	}()
	dbPath := filepath.Join(dir, "midsag.db")
	// synchronous=FULL: in WAL mode SQLite then syncs the WAL at every
	// commit, which is what makes a commit survive power loss
	// (https://www.sqlite.org/pragma.html#pragma_synchronous).
	// _txlock=immediate takes the write lock at BEGIN, so a transaction that
	// reads before it writes cannot fail with SQLITE_BUSY half-way.
	wdsn := dsn(dbPath, "_txlock=immediate", "_pragma=journal_mode(WAL)",
		"_pragma=synchronous(FULL)", "_pragma=busy_timeout(10000)", "_pragma=foreign_keys(1)")
	w, err := sql.Open("sqlite", wdsn)
	if err != nil {
		return nil, fmt.Errorf("store: open %s: %w", dbPath, err)
	}
	w.SetMaxOpenConns(1)
	w.SetConnMaxIdleTime(0)
	if err := migrate(w); err != nil {
		w.Close()
		return nil, err
	}
	r, err := sql.Open("sqlite", dsn(dbPath, "_pragma=busy_timeout(10000)", "_pragma=query_only(1)"))
	if err != nil {
		w.Close()
		return nil, fmt.Errorf("store: open %s for reading: %w", dbPath, err)
	}
	r.SetMaxOpenConns(4)
	s := &Store{dir: dir, spool: spool, opts: opts, w: w, r: r, lock: lock}
	// A damaged database still opens, so the service can say why it is
	// not ready (Healthy) instead of failing to start in silence.
	s.damaged = quickCheck(context.Background(), w, "quick_check")
	// Never sweep by a damaged database: a row it cannot read would make
	// an acknowledged file look unreferenced.
	if err := s.sweepIfSound(); err != nil {
		s.closeDBs()
		return nil, err
	}
	// The study folders and midsag.db may exist only in the page cache if
	// the previous process died before syncing their parents; sync both
	// levels once so rows committed from now on never point into a folder
	// that a power loss could take away (POSIX fsync on a directory, as
	// Linux ext4/xfs implement it; common practice).
	if err := syncDir(spool); err != nil {
		s.closeDBs()
		return nil, err
	}
	if err := syncDir(dir); err != nil {
		s.closeDBs()
		return nil, err
	}
	if opts.GroupCommit > 0 {
		s.reqs = make(chan *putReq, maxBatch)
		s.done = make(chan struct{})
		go s.committer()
	}
	opened = true
	return s, nil
}

func dsn(file string, params ...string) string {
	u := url.URL{Scheme: "file", Path: file}
	return u.String() + "?" + strings.Join(params, "&")
}

// Close waits for Puts in flight, then closes the database. Puts that start
// after Close fail with ErrClosed.
func (s *Store) Close() error {
	s.mu.Lock()
	if s.closed {
		s.mu.Unlock()
		return nil
	}
	s.closed = true
	s.mu.Unlock()
	s.puts.Wait()
	if s.reqs != nil {
		close(s.reqs)
		<-s.done
	}
	return s.closeDBs()
}

func (s *Store) closeDBs() error {
	return errors.Join(s.r.Close(), s.w.Close(), s.lock.Close())
}

// migrations are applied in order, each once; schema_version records the
// number applied. Append only: a released migration never changes.
var migrations = []string{
	`CREATE TABLE instances (
		seq INTEGER PRIMARY KEY AUTOINCREMENT,
		study_uid TEXT NOT NULL,
		series_uid TEXT NOT NULL,
		sop_uid TEXT NOT NULL UNIQUE,
		sop_class_uid TEXT NOT NULL,
		transfer_syntax_uid TEXT NOT NULL,
		origin TEXT NOT NULL,
		calling_ae TEXT NOT NULL,
		remote TEXT NOT NULL,
		size INTEGER NOT NULL,
		sha256 TEXT NOT NULL,
		received_at INTEGER NOT NULL,
		path TEXT NOT NULL UNIQUE
	);
	CREATE INDEX instances_study ON instances (study_uid, seq);
	CREATE TABLE studies (
		study_uid TEXT PRIMARY KEY,
		n INTEGER NOT NULL,
		last_seq INTEGER NOT NULL,
		last_received INTEGER NOT NULL
	);
	CREATE INDEX studies_last_received ON studies (last_received);
	CREATE TABLE records (
		id TEXT PRIMARY KEY,
		study_uid TEXT NOT NULL,
		version INTEGER NOT NULL,
		status TEXT NOT NULL,
		reason TEXT NOT NULL,
		message TEXT NOT NULL,
		model_name TEXT NOT NULL,
		model_version TEXT NOT NULL,
		explain INTEGER NOT NULL,
		sop_uids TEXT NOT NULL,
		covered_seq INTEGER NOT NULL,
		result_json BLOB,
		created_at INTEGER NOT NULL,
		finished_at INTEGER NOT NULL,
		UNIQUE (study_uid, version)
	);
	CREATE INDEX records_created ON records (created_at, id);
	CREATE INDEX records_status ON records (status, created_at, id);
	CREATE TABLE probe (id INTEGER PRIMARY KEY CHECK (id = 1), at INTEGER NOT NULL);`,
}

func migrate(db *sql.DB) error {
	ctx := context.Background()
	if _, err := db.ExecContext(ctx, `CREATE TABLE IF NOT EXISTS schema_version (version INTEGER NOT NULL)`); err != nil {
		return fmt.Errorf("store: create schema_version: %w", err)
	}
	for {
		done, err := migrateOne(ctx, db)
		if err != nil {
			return err
		}
		if done {
			return nil
		}
	}
}

// migrateOne applies the next migration, reading the version inside the
// same write transaction so two openers cannot both apply it.
func migrateOne(ctx context.Context, db *sql.DB) (done bool, err error) {
	tx, err := db.BeginTx(ctx, nil)
	if err != nil {
		return false, fmt.Errorf("store: migrate: %w", err)
	}
	defer tx.Rollback()
	var v int
	if err := tx.QueryRowContext(ctx, `SELECT COALESCE(MAX(version), 0) FROM schema_version`).Scan(&v); err != nil {
		return false, fmt.Errorf("store: read schema version: %w", err)
	}
	if v > len(migrations) {
		return false, fmt.Errorf("store: schema version %d is newer than this program (%d)", v, len(migrations))
	}
	if v == len(migrations) {
		return true, nil
	}
	if _, err := tx.ExecContext(ctx, migrations[v]); err != nil {
		return false, fmt.Errorf("store: migration %d: %w", v+1, err)
	}
	if _, err := tx.ExecContext(ctx, `DELETE FROM schema_version; INSERT INTO schema_version (version) VALUES (?)`, v+1); err != nil {
		return false, fmt.Errorf("store: record schema version %d: %w", v+1, err)
	}
	if err := tx.Commit(); err != nil {
		return false, fmt.Errorf("store: commit migration %d: %w", v+1, err)
	}
	return false, nil
}

func (s *Store) sweepIfSound() error {
	if s.damaged != nil {
		return nil
	}
	return s.sweep()
}

// sweep removes temporary files and spool files no row points to. Both
// come from Puts that never returned success: a temp file from a crash
// before rename, an unreferenced .dcm from a crash before commit, or the
// previous version of a replaced instance whose removal was interrupted.
func (s *Store) sweep() error {
	entries, err := os.ReadDir(s.spool)
	if err != nil {
		return fmt.Errorf("store: read spool: %w", err)
	}
	for _, e := range entries {
		p := filepath.Join(s.spool, e.Name())
		if !e.IsDir() {
			if strings.HasSuffix(e.Name(), tmpSuffix) {
				if err := os.Remove(p); err != nil {
					return fmt.Errorf("store: remove leftover %s: %w", p, err)
				}
			}
			continue
		}
		if err := s.sweepStudy(e.Name()); err != nil {
			return err
		}
	}
	return nil
}

func (s *Store) sweepStudy(name string) error {
	// Paths of a folder sort between "spool/<name>/" and "spool/<name>0"
	// because '0' follows '/' in ASCII, so the unique index on path answers
	// this as a range scan.
	lo := path.Join("spool", name) + "/"
	hi := path.Join("spool", name) + "0"
	rows, err := s.w.Query(`SELECT path FROM instances WHERE path >= ? AND path < ?`, lo, hi)
	if err != nil {
		return fmt.Errorf("store: list rows of %s: %w", name, err)
	}
	known := map[string]bool{}
	for rows.Next() {
		var p string
		if err := rows.Scan(&p); err != nil {
			rows.Close()
			return fmt.Errorf("store: list rows of %s: %w", name, err)
		}
		known[p] = true
	}
	if err := errors.Join(rows.Err(), rows.Close()); err != nil {
		return fmt.Errorf("store: list rows of %s: %w", name, err)
	}
	dir := filepath.Join(s.spool, name)
	files, err := os.ReadDir(dir)
	if err != nil {
		return fmt.Errorf("store: read %s: %w", dir, err)
	}
	for _, f := range files {
		rel := path.Join("spool", name, f.Name())
		if f.IsDir() || known[rel] {
			continue
		}
		if !strings.HasSuffix(f.Name(), tmpSuffix) && !strings.HasSuffix(f.Name(), ".dcm") {
			continue
		}
		if err := os.Remove(filepath.Join(dir, f.Name())); err != nil {
			return fmt.Errorf("store: remove leftover %s: %w", rel, err)
		}
	}
	return nil
}

// syncDir makes the folder's entries durable (atomicfile.SyncDir).
func syncDir(dir string) error {
	if err := atomicfile.SyncDir(dir); err != nil {
		return fmt.Errorf("store: %w", err)
	}
	return nil
}
