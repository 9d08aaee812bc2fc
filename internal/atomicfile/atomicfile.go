// Package atomicfile writes files that are never seen half-written and
// survive a crash whole or not at all: the bytes go to a temporary file in
// the target's folder, which is fsynced, renamed over the target
// (rename(2) replaces it atomically, POSIX.1-2017) and the folder fsynced
// so the new name is durable too. Any failure removes the temporary file.
//
// Whole files: atomicfile.WriteFile(path, data). Streams:
//
//	f, err := atomicfile.Create(path)
//	if err != nil { ... }
//	defer f.Abort() // a no-op once committed
//	... write to f ...
//	return f.Commit()
package atomicfile

import (
	"fmt"
	"io/fs"
	"os"
	"path/filepath"
)

// TempSuffix ends every temporary file's name, so a sweep after a crash
// can find and remove the ones never committed.
const TempSuffix = ".tmp"

// Option changes how a file is written.
type Option func(*options)

type options struct {
	perm        fs.FileMode
	skipDirSync bool
}

// Perm sets the committed file's permission bits; without it they are
// 0600 (owner-only, as os.CreateTemp makes them), which suits files that
// may hold patient data. Outputs meant for other users pass 0644.
func Perm(mode fs.FileMode) Option { return func(o *options) { o.perm = mode } }

// SkipDirSync leaves the folder's fsync to the caller, who commits many
// files into one folder and syncs it once (SyncDir) before relying on
// any of the new names.
func SkipDirSync() Option { return func(o *options) { o.skipDirSync = true } }

// File is a file being written; nothing is visible at its path until
// Commit returns nil.
type File struct {
	f    *os.File
	path string
	opts options
	done bool
	err  error
}

// Create starts writing the file at path: a temporary file in path's
// folder, which must exist.
func Create(path string, opts ...Option) (*File, error) {
	o := options{perm: 0o600}
	for _, opt := range opts {
		opt(&o)
	}
	f, err := os.CreateTemp(filepath.Dir(path), "."+filepath.Base(path)+"-*"+TempSuffix)
	if err != nil {
		return nil, fmt.Errorf("atomicfile: create %s: %w", path, err)
	}
	return &File{f: f, path: path, opts: o}, nil
}

// Write writes p to the temporary file. After a failed Write the file can
// only be aborted: Commit returns the write's error.
func (f *File) Write(p []byte) (int, error) {
	if f.done {
		return 0, fmt.Errorf("atomicfile: write %s: %w", f.path, os.ErrClosed)
	}
	n, err := f.f.Write(p)
	if err != nil && f.err == nil {
		f.err = err
	}
	return n, err
}

// Commit makes the written bytes the file at path: fsync, close, rename,
// then the folder's fsync (unless SkipDirSync). On any failure the
// temporary file is removed and path keeps what it held before, except
// when only the folder's fsync failed: then the new file is in place but
// may not survive a crash.
func (f *File) Commit() (err error) {
	if f.done {
		return fmt.Errorf("atomicfile: commit %s: %w", f.path, os.ErrClosed)
	}
	f.done = true
	tmp := f.f.Name()
	defer func() {
		if err != nil {
			os.Remove(tmp)
			err = fmt.Errorf("atomicfile: write %s: %w", f.path, err)
		}
	}()
	err = f.err
	if err == nil {
		err = f.f.Chmod(f.opts.perm)
	}
	if err == nil {
		err = f.f.Sync()
	}
	if cerr := f.f.Close(); err == nil {
		err = cerr
	}
	if err != nil {
		return err
	}
	if err := os.Rename(tmp, f.path); err != nil {
		return err
	}
	if f.opts.skipDirSync {
		return nil
	}
	if err := SyncDir(filepath.Dir(f.path)); err != nil {
		return fmt.Errorf("atomicfile: %s renamed into place: %w", f.path, err)
	}
	return nil
}

// Abort discards the file: the temporary file is closed and removed and
// path is untouched. It does nothing after Commit, so it can be deferred.
func (f *File) Abort() {
	if f.done {
		return
	}
	f.done = true
	f.f.Close()
	os.Remove(f.f.Name())
}

// WriteFile writes data to path atomically and durably.
func WriteFile(path string, data []byte, opts ...Option) error {
	f, err := Create(path, opts...)
	if err != nil {
		return err
	}
	if _, err := f.Write(data); err != nil {
		f.Abort()
		return fmt.Errorf("atomicfile: write %s: %w", path, err)
	}
	return f.Commit()
}

// SyncDir makes the folder's entries (files created, renamed or removed
// in it) durable. POSIX leaves directory entries in the page cache until
// the directory itself is fsynced (fsync(2); common practice since
// ext4's delayed allocation made it visible).
func SyncDir(dir string) error {
	d, err := os.Open(dir)
	if err != nil {
		return fmt.Errorf("open folder %s: %w", dir, err)
	}
	err = d.Sync()
	if cerr := d.Close(); err == nil {
		err = cerr
	}
	if err != nil {
		return fmt.Errorf("fsync folder %s: %w", dir, err)
	}
	return nil
}
