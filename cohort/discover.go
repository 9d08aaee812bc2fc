package cohort

import (
	"context"
	"database/sql"
	"errors"
	"fmt"
	"io"
	"io/fs"
	"os"
	"path/filepath"
	"sort"

	"golang.org/x/sync/errgroup"

	"github.com/midsag/midsag"
	"github.com/midsag/midsag/inputs"
)

// HeaderReader reads the header of one DICOM stream of size bytes without
// its pixel data. preprocess.Preprocessor implements it. It may return an
// Instance together with a refusal (a file whose header names its study
// but whose pixel data is cut short).
type HeaderReader interface {
	ReadHeader(name string, r io.Reader, size int64) (*midsag.Instance, error)
}

// reasonArchive marks a zip archive's own index entry in the reason
// column of the header index; its entries have theirs. It is never
// reported: Discovery.Refused and the batch tables leave it out, so it is
// not a midsag.Reason.
const reasonArchive = "archive"

// discoverBatch is how many files are looked up, read and recorded
// together: one transaction per batch keeps SQLite's per-commit sync from
// dominating a walk over millions of files.
const discoverBatch = 512

// Discovery counts what Discover found.
type Discovery struct {
	// Files is the number of files and zip entries seen.
	Files int `json:"files"`
	// Read is how many headers were read because the index did not hold
	// the file with the same size and modification time.
	Read int `json:"read"`
	// Cached is how many were taken from the index unchanged.
	Cached int `json:"cached"`
	// Removed is how many index entries were dropped because their file
	// is gone.
	Removed int `json:"removed"`
	// Refused counts files that are not usable DICOM, by reason code.
	Refused map[midsag.Reason]int `json:"refused"`
	// Studies is the number of distinct Study Instance UIDs.
	Studies int `json:"studies"`
}

// indexRow is one file's entry in the header index.
type indexRow struct {
	path, file, entry string
	size, mtime       int64
	study, reason     string
}

// fileInfo is one regular file found by the walk.
type fileInfo struct {
	path        string
	size, mtime int64
}

// Discover walks root (folders and zip archives, any layout), reads the
// header of every file not already in the index with the same size and
// modification time, and records each file's Study Instance UID or the
// reason it was refused. Symbolic links to files and folders are followed,
// each folder walked once (inputs.Walk); the size and time recorded are
// the link target's. Hidden files and folders, and the ledger's own
// folder, are skipped. Unreadable files and broken links are recorded as
// unreadable, never fatal.
func (s *Ledger) Discover(ctx context.Context, root string, hr HeaderReader, workers int) (*Discovery, error) {
	gen, err := s.nextGen(ctx)
	if err != nil {
		return nil, err
	}
	own, _ := filepath.Abs(s.dir)
	d := &Discovery{Refused: map[midsag.Reason]int{}}
	var batch []fileInfo
	flush := func() error {
		err := s.discoverBatch(ctx, batch, gen, hr, max(workers, 1), d)
		batch = batch[:0]
		return err
	}
	ownInfo, ownErr := os.Stat(s.dir)
	skip := func(path string, info fs.FileInfo) bool {
		if ownErr == nil && os.SameFile(info, ownInfo) {
			return true
		}
		abs, _ := filepath.Abs(path)
		return abs == own
	}
	err = inputs.Walk(root, skip, func(path string, info fs.FileInfo, err error) error {
		if err != nil {
			// An unreadable folder or a broken link is recorded like an
			// unreadable file, never skipped silently.
			batch = append(batch, fileInfo{path: path, size: -1})
		} else {
			batch = append(batch, fileInfo{path: path, size: info.Size(), mtime: info.ModTime().UnixNano()})
		}
		if len(batch) >= discoverBatch {
			return flush()
		}
		return ctx.Err()
	})
	if err == nil {
		err = flush()
	}
	if err != nil {
		return nil, fmt.Errorf("cohort: discover %s: %w", root, err)
	}
	if err := s.finishDiscovery(ctx, gen, d); err != nil {
		return nil, err
	}
	return d, nil
}

func (s *Ledger) nextGen(ctx context.Context) (int64, error) {
	var gen int64
	err := s.db.QueryRowContext(ctx, `INSERT INTO state(key, value) VALUES('gen', 1)
		ON CONFLICT(key) DO UPDATE SET value = value + 1 RETURNING value`).Scan(&gen)
	if err != nil {
		return 0, fmt.Errorf("cohort: index generation: %w", err)
	}
	return gen, nil
}

// discoverBatch looks the files up in the index, reads the headers of the
// new or changed ones on workers goroutines, and records the batch in one
// transaction.
func (s *Ledger) discoverBatch(ctx context.Context, files []fileInfo, gen int64, hr HeaderReader, workers int, d *Discovery) error {
	if len(files) == 0 {
		return nil
	}
	tx, err := s.db.BeginTx(ctx, nil)
	if err != nil {
		return err
	}
	defer tx.Rollback()
	var miss []fileInfo
	for _, f := range files {
		var size, mtime int64
		var reason string
		err := tx.QueryRowContext(ctx, `SELECT size, mtime, reason FROM files WHERE path = ?`, f.path).Scan(&size, &mtime, &reason)
		switch {
		case errors.Is(err, sql.ErrNoRows):
			miss = append(miss, f)
			continue
		case err != nil:
			return err
		case size != f.size || mtime != f.mtime || f.size < 0:
			miss = append(miss, f)
			continue
		}
		if _, err := tx.ExecContext(ctx, `UPDATE files SET gen = ? WHERE path = ?`, gen, f.path); err != nil {
			return err
		}
		n := int64(1)
		if reason == reasonArchive {
			// The archive is unchanged, so are its entries.
			res, err := tx.ExecContext(ctx, `UPDATE files SET gen = ? WHERE file = ? AND entry != ''`, gen, f.path)
			if err != nil {
				return err
			}
			n, _ = res.RowsAffected()
		}
		d.Cached += int(n)
		d.Files += int(n)
	}
	results, err := readFiles(ctx, miss, hr, workers)
	if err != nil {
		return err
	}
	for _, rows := range results {
		for _, r := range rows {
			if _, err := tx.ExecContext(ctx, `INSERT OR REPLACE INTO files(path, file, entry, size, mtime, study, reason, gen)
				VALUES(?, ?, ?, ?, ?, ?, ?, ?)`, r.path, r.file, r.entry, r.size, r.mtime, r.study, r.reason, gen); err != nil {
				return err
			}
			if r.reason != reasonArchive {
				d.Read++
				d.Files++
			}
		}
	}
	return tx.Commit()
}

// readFiles reads the headers of files on at most workers goroutines and
// returns each file's rows in order. A cancelled ctx stops it before the
// next file.
func readFiles(ctx context.Context, files []fileInfo, hr HeaderReader, workers int) ([][]indexRow, error) {
	results := make([][]indexRow, len(files))
	g, gctx := errgroup.WithContext(ctx)
	g.SetLimit(max(workers, 1))
	for i := range files {
		if gctx.Err() != nil {
			break
		}
		g.Go(func() error {
			if err := gctx.Err(); err != nil {
				return err
			}
			results[i] = readFile(files[i], hr)
			return nil
		})
	}
	if err := g.Wait(); err != nil {
		return nil, err
	}
	return results, ctx.Err()
}

// readFile reads one file's header, or every entry's of a zip archive.
func readFile(fi fileInfo, hr HeaderReader) []indexRow {
	row := indexRow{path: fi.path, file: fi.path, size: fi.size, mtime: fi.mtime}
	if fi.size < 0 {
		row.reason = string(midsag.ReasonUnreadable)
		return []indexRow{row}
	}
	f, err := os.Open(fi.path)
	if err != nil {
		row.reason = string(midsag.ReasonUnreadable)
		return []indexRow{row}
	}
	defer f.Close()
	var magic [4]byte
	if n, _ := f.ReadAt(magic[:], 0); n == 4 && inputs.IsZip(magic[:]) {
		return readZip(f, row, hr)
	}
	inst, err := hr.ReadHeader(fi.path, f, fi.size)
	return []indexRow{headerRow(row, inst, err)}
}

// headerRow fills a row from a header read's outcome.
func headerRow(row indexRow, inst *midsag.Instance, err error) indexRow {
	if inst != nil {
		row.study = inst.StudyInstanceUID
	}
	if err != nil {
		row.reason = string(midsag.ReasonUnreadable)
		if r, ok := midsag.ReasonOf(err); ok {
			row.reason = string(r)
		}
	}
	return row
}

// readZip reads every entry of an archive within the input limits
// (inputs.ZipEntries); the archive's own row marks it, so an unchanged
// archive is not opened again. An archive refused whole (unreadable,
// too many entries) has that reason on its own row.
func readZip(f *os.File, arch indexRow, hr HeaderReader) []indexRow {
	entries, err := inputs.ZipEntries(f, arch.size, arch.path, inputs.DefaultLimits)
	if err != nil {
		return []indexRow{headerRow(arch, nil, err)}
	}
	arch.reason = reasonArchive
	out := []indexRow{arch}
	for _, e := range entries {
		row := indexRow{path: e.Name, file: arch.path, entry: e.Path, size: e.Size, mtime: arch.mtime}
		rc, err := e.Open()
		if err != nil {
			out = append(out, headerRow(row, nil, err))
			continue
		}
		inst, err := hr.ReadHeader(row.path, rc, row.size)
		rc.Close()
		out = append(out, headerRow(row, inst, err))
	}
	return out
}

// finishDiscovery drops entries of files no longer seen and counts
// refusals and studies.
func (s *Ledger) finishDiscovery(ctx context.Context, gen int64, d *Discovery) error {
	res, err := s.db.ExecContext(ctx, `DELETE FROM files WHERE gen != ?`, gen)
	if err != nil {
		return fmt.Errorf("cohort: prune index: %w", err)
	}
	n, _ := res.RowsAffected()
	d.Removed = int(n)
	rows, err := s.db.QueryContext(ctx, `SELECT reason, COUNT(*) FROM files WHERE reason NOT IN ('', ?) GROUP BY reason`, reasonArchive)
	if err != nil {
		return fmt.Errorf("cohort: count refusals: %w", err)
	}
	defer rows.Close()
	for rows.Next() {
		var r string
		var c int
		if err := rows.Scan(&r, &c); err != nil {
			return fmt.Errorf("cohort: count refusals: %w", err)
		}
		d.Refused[midsag.Reason(r)] = c
	}
	if err := rows.Err(); err != nil {
		return fmt.Errorf("cohort: count refusals: %w", err)
	}
	if err := s.db.QueryRowContext(ctx, `SELECT COUNT(DISTINCT study) FROM files WHERE study != ''`).Scan(&d.Studies); err != nil {
		return fmt.Errorf("cohort: count studies: %w", err)
	}
	return nil
}

// Studies returns the Study Instance UIDs in the index, sorted.
func (s *Ledger) Studies(ctx context.Context) ([]string, error) {
	rows, err := s.db.QueryContext(ctx, `SELECT DISTINCT study FROM files WHERE study != '' ORDER BY study`)
	if err != nil {
		return nil, fmt.Errorf("cohort: list studies: %w", err)
	}
	defer rows.Close()
	var out []string
	for rows.Next() {
		var uid string
		if err := rows.Scan(&uid); err != nil {
			return nil, fmt.Errorf("cohort: list studies: %w", err)
		}
		out = append(out, uid)
	}
	return out, rows.Err()
}

// studyFile is one file of a study: a path, or an entry of a zip archive.
type studyFile struct{ file, entry string }

func (s *Ledger) studyFiles(ctx context.Context, uid string) ([]studyFile, error) {
	rows, err := s.db.QueryContext(ctx, `SELECT file, entry FROM files WHERE study = ? ORDER BY path`, uid)
	if err != nil {
		return nil, fmt.Errorf("cohort: files of study: %w", err)
	}
	defer rows.Close()
	var out []studyFile
	for rows.Next() {
		var f studyFile
		if err := rows.Scan(&f.file, &f.entry); err != nil {
			return nil, fmt.Errorf("cohort: files of study: %w", err)
		}
		out = append(out, f)
	}
	return out, rows.Err()
}

// sources opens the study's zip archives once each and returns one
// Source per file, its entries read within the input limits
// (inputs.ZipEntries), with a function that closes the archives.
func sources(files []studyFile) ([]midsag.Source, func()) {
	archives := map[string]*os.File{}
	entries := map[string]map[string]midsag.Source{}
	var out []midsag.Source
	for _, f := range files {
		if f.entry == "" {
			out = append(out, inputs.File(f.file))
			continue
		}
		if _, ok := archives[f.file]; !ok {
			archives[f.file], entries[f.file] = openArchive(f.file)
		}
		name := f.file + "!" + f.entry
		src, ok := entries[f.file][f.entry]
		if !ok {
			src = midsag.Source{Name: name, Open: func() (io.ReadCloser, error) {
				return nil, fmt.Errorf("open %s: entry is gone from the archive", name)
			}}
		}
		out = append(out, src)
	}
	sort.SliceStable(out, func(i, j int) bool { return out[i].Name < out[j].Name })
	return out, func() {
		for _, f := range archives {
			if f != nil {
				f.Close()
			}
		}
	}
}

// openArchive opens a zip archive and indexes its entries by name; an
// archive that can no longer be read has none, so its entries report
// themselves gone.
func openArchive(path string) (*os.File, map[string]midsag.Source) {
	byName := map[string]midsag.Source{}
	f, err := os.Open(path)
	if err != nil {
		return nil, byName
	}
	st, err := f.Stat()
	if err != nil {
		return f, byName
	}
	entries, err := inputs.ZipEntries(f, st.Size(), path, inputs.DefaultLimits)
	if err != nil {
		return f, byName
	}
	for _, e := range entries {
		byName[e.Path] = e.Source
	}
	return f, byName
}
