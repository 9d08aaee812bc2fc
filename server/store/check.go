package store

import (
	"context"
	"database/sql"
	"errors"
	"fmt"
	"io/fs"
	"os"
	"path"
	"path/filepath"
	"strings"
)

// ErrDamaged is returned (wrapped, with SQLite's findings) when the
// database fails its integrity check.
var ErrDamaged = errors.New("the database is damaged")

// quickCheck runs PRAGMA quick_check on db: SQLite's check of the b-trees
// and records, without index cross-checks
// (https://www.sqlite.org/pragma.html#pragma_quick_check). It returns nil
// when SQLite answers "ok".
func quickCheck(ctx context.Context, db *sql.DB, pragma string) error {
	rows, err := db.QueryContext(ctx, `PRAGMA `+pragma)
	if err != nil {
		return fmt.Errorf("store: %s: %w: %w", pragma, ErrDamaged, err)
	}
	defer rows.Close()
	var found []string
	for rows.Next() {
		var line string
		if err := rows.Scan(&line); err != nil {
			return fmt.Errorf("store: %s: %w: %w", pragma, ErrDamaged, err)
		}
		if line != "ok" {
			found = append(found, line)
		}
	}
	if err := rows.Err(); err != nil {
		return fmt.Errorf("store: %s: %w: %w", pragma, ErrDamaged, err)
	}
	if len(found) > 0 {
		if len(found) > 5 {
			found = append(found[:5], fmt.Sprintf("and %d more", len(found)-5))
		}
		return fmt.Errorf("store: %s: %w: %s", pragma, ErrDamaged, strings.Join(found, "; "))
	}
	return nil
}

// Healthy returns nil when the store passed PRAGMA quick_check at Open,
// else what SQLite found; a damaged store keeps serving reads it can, but
// reports itself not ready.
func (s *Store) Healthy() error { return s.damaged }

// Problem is one finding of Check.
type Problem struct {
	// Kind is "database", "missing", "corrupt", "unreferenced" or
	// "leftover".
	Kind string `json:"kind"`
	// SOPInstanceUID names the instance, when the problem is about one.
	SOPInstanceUID string `json:"sop_instance_uid,omitempty"`
	// Path is relative to the store's folder.
	Path   string `json:"path"`
	Detail string `json:"detail"`
}

// Report is what Check found.
type Report struct {
	Instances int64     `json:"instances"`
	Bytes     int64     `json:"bytes"`
	Problems  []Problem `json:"problems"`
}

// Bad reports whether any problem is damage, not only leftovers a restart
// removes.
func (r Report) Bad() bool {
	for _, p := range r.Problems {
		if p.Kind != "leftover" && p.Kind != "unreferenced" {
			return true
		}
	}
	return false
}

// Check verifies the store in dir without changing it, and may run while
// a service has it open (it reads the database read-only and takes no
// lock): SQLite's PRAGMA integrity_check, every instance's spool file
// against its stored size and sha256, and spool files no row points to
// (which the next Open removes). each, when set, is called after every
// instance checked.
func Check(ctx context.Context, dir string, each func(done int64)) (Report, error) {
	var rep Report
	dbPath := filepath.Join(dir, "midsag.db")
	if _, err := os.Stat(dbPath); err != nil {
		return rep, fmt.Errorf("store: %s is not a midsag data folder: %w", dir, err)
	}
	db, err := sql.Open("sqlite", dsn(dbPath, "mode=ro", "_pragma=busy_timeout(10000)", "_pragma=query_only(1)"))
	if err != nil {
		return rep, fmt.Errorf("store: open %s: %w", dbPath, err)
	}
	defer db.Close()
	if err := quickCheck(ctx, db, "integrity_check"); err != nil {
		rep.Problems = append(rep.Problems, Problem{Kind: "database", Path: "midsag.db", Detail: err.Error()})
	}
	known := map[string]bool{}
	rows, err := db.QueryContext(ctx, `SELECT `+instanceColumns+` FROM instances ORDER BY seq`)
	if err != nil {
		rep.Problems = append(rep.Problems, Problem{Kind: "database", Path: "midsag.db", Detail: "list instances: " + err.Error()})
		return rep, nil
	}
	defer rows.Close()
	for rows.Next() {
		in, err := scanInstance(rows)
		if err != nil {
			rep.Problems = append(rep.Problems, Problem{Kind: "database", Path: "midsag.db", Detail: "read instance row: " + err.Error()})
			continue
		}
		rep.Instances++
		rep.Bytes += in.Size
		known[in.Path] = true
		if p, bad := checkInstance(dir, in); bad {
			rep.Problems = append(rep.Problems, p)
		}
		if each != nil {
			each(rep.Instances)
		}
		if err := ctx.Err(); err != nil {
			return rep, err
		}
	}
	if err := rows.Err(); err != nil {
		rep.Problems = append(rep.Problems, Problem{Kind: "database", Path: "midsag.db", Detail: "list instances: " + err.Error()})
	}
	rep.Problems = append(rep.Problems, unreferenced(dir, known)...)
	return rep, nil
}

// checkInstance compares one spool file with its row.
func checkInstance(dir string, in Instance) (Problem, bool) {
	p := Problem{SOPInstanceUID: in.SOPInstanceUID, Path: in.Path}
	if !filepath.IsLocal(filepath.FromSlash(in.Path)) || !strings.HasPrefix(in.Path, "spool/") {
		p.Kind, p.Detail = "database", "the row's path is not in the spool"
		return p, true
	}
	f, err := os.Open(filepath.Join(dir, filepath.FromSlash(in.Path)))
	if errors.Is(err, fs.ErrNotExist) {
		p.Kind, p.Detail = "missing", "no spool file"
		return p, true
	}
	if err != nil {
		p.Kind, p.Detail = "corrupt", err.Error()
		return p, true
	}
	defer f.Close()
	if err := verify(f, in); err != nil {
		p.Kind, p.Detail = "corrupt", err.Error()
		return p, true
	}
	return p, false
}

// unreferenced lists spool files no row points to: temporary files of
// uploads that never finished ("leftover") and instance files whose row
// never committed ("unreferenced"); the next Open removes both.
func unreferenced(dir string, known map[string]bool) []Problem {
	var out []Problem
	root := filepath.Join(dir, "spool")
	filepath.WalkDir(root, func(p string, d fs.DirEntry, err error) error {
		if err != nil || d.IsDir() {
			return nil
		}
		rel, err := filepath.Rel(dir, p)
		if err != nil {
			return nil
		}
		rel = filepath.ToSlash(rel)
		switch {
		case known[rel]:
		case strings.HasSuffix(rel, tmpSuffix):
			out = append(out, Problem{Kind: "leftover", Path: rel, Detail: "temporary file of an upload that never finished"})
		case path.Ext(rel) == ".dcm":
			out = append(out, Problem{Kind: "unreferenced", Path: rel, Detail: "no row points to this file"})
		}
		return nil
	})
	return out
}
