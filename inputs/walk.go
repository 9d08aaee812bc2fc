package inputs

import (
	"errors"
	"fmt"
	"io/fs"
	"os"
	"path/filepath"
)

// ErrBrokenLink marks a symbolic link whose target cannot be reached: a
// dangling link, as data-versioning tools leave for content not fetched.
var ErrBrokenLink = errors.New("broken symbolic link")

// WalkFunc is called by Walk for each regular file, with the file's own
// (link-followed) information and a nil error, and for each entry that
// could not be read (a broken link, an unreadable folder) with a nil info
// and the error. A non-nil return stops the walk with that error.
type WalkFunc func(path string, info fs.FileInfo, err error) error

// Walk visits the regular files under root in name order, following
// symbolic links to files and folders, as cohorts laid out by
// data-versioning tools are folders of links. Hidden entries are skipped
// (root itself never is), and folders for which skip returns true. A
// folder is walked once however many links lead to it, which also ends
// link loops: its files were already visited, so nothing is lost. Files
// reached by several paths are visited under each.
func Walk(root string, skip func(path string, info fs.FileInfo) bool, fn WalkFunc) error {
	st, err := os.Stat(root)
	if err != nil {
		return err
	}
	if !st.IsDir() {
		return fmt.Errorf("%s is not a folder", root)
	}
	w := walker{seen: map[any]bool{}, skip: skip, fn: fn}
	return w.dir(root, st, true)
}

type walker struct {
	seen map[any]bool
	skip func(string, fs.FileInfo) bool
	fn   WalkFunc
}

func (w *walker) dir(path string, st fs.FileInfo, root bool) error {
	id := fileID(path, st)
	if w.seen[id] {
		return nil
	}
	w.seen[id] = true
	ents, err := os.ReadDir(path)
	if err != nil {
		if root {
			return err
		}
		return w.fn(path, nil, err)
	}
	for _, e := range ents {
		if Hidden(e.Name()) {
			continue
		}
		p := filepath.Join(path, e.Name())
		var info fs.FileInfo
		if e.Type()&fs.ModeSymlink != 0 {
			info, err = os.Stat(p)
			if err != nil {
				if errors.Is(err, fs.ErrNotExist) {
					err = fmt.Errorf("%w: %s leads nowhere", ErrBrokenLink, p)
				}
				if err := w.fn(p, nil, err); err != nil {
					return err
				}
				continue
			}
		} else if info, err = e.Info(); err != nil {
			if err := w.fn(p, nil, err); err != nil {
				return err
			}
			continue
		}
		switch {
		case info.IsDir():
			if w.skip != nil && w.skip(p, info) {
				continue
			}
			if err := w.dir(p, info, false); err != nil {
				return err
			}
		case info.Mode().IsRegular():
			if err := w.fn(p, info, nil); err != nil {
				return err
			}
		}
	}
	return nil
}
