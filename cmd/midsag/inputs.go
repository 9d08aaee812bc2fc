package main

import (
	"archive/zip"
	"bytes"
	"fmt"
	"io"
	"io/fs"
	"os"
	"path/filepath"
	"sort"
	"strings"

	"github.com/midsag/midsag"
)

// maxZipEntries bounds the entries read from one zip archive.
const maxZipEntries = 20000

// collectSources expands the command-line paths into one source per file:
// files as given, folders walked recursively (hidden files and folders
// skipped), and zip archives opened entry by entry.
func collectSources(paths []string) ([]midsag.Source, func(), error) {
	var (
		out     []midsag.Source
		closers []io.Closer
	)
	closeAll := func() {
		for _, c := range closers {
			c.Close()
		}
	}
	for _, p := range paths {
		st, err := os.Stat(p)
		if err != nil {
			closeAll()
			return nil, nil, midsag.Reject(midsag.ReasonNoInput, "cannot open input", err)
		}
		if st.IsDir() {
			var files []string
			err := filepath.WalkDir(p, func(path string, d fs.DirEntry, err error) error {
				if err != nil {
					return err
				}
				if path != p && strings.HasPrefix(d.Name(), ".") {
					if d.IsDir() {
						return filepath.SkipDir
					}
					return nil
				}
				if d.Type().IsRegular() {
					files = append(files, path)
				}
				return nil
			})
			if err != nil {
				closeAll()
				return nil, nil, fmt.Errorf("walk %s: %w", p, err)
			}
			sort.Strings(files)
			for _, f := range files {
				out = append(out, fileSource(f))
			}
			continue
		}
		if isZip(p) {
			zr, err := zip.OpenReader(p)
			if err != nil {
				closeAll()
				return nil, nil, midsag.Reject(midsag.ReasonNotDICOM, "cannot read zip archive "+p, err)
			}
			closers = append(closers, zr)
			if len(zr.File) > maxZipEntries {
				closeAll()
				return nil, nil, midsag.Rejectf(midsag.ReasonTooLarge, "zip archive %s has %d entries, above the limit of %d", p, len(zr.File), maxZipEntries)
			}
			for _, zf := range zr.File {
				if zf.FileInfo().IsDir() || strings.HasPrefix(filepath.Base(zf.Name), ".") || strings.HasPrefix(zf.Name, "__MACOSX/") {
					continue
				}
				out = append(out, midsag.Source{Name: p + "!" + zf.Name, Open: zf.Open})
			}
			continue
		}
		out = append(out, fileSource(p))
	}
	if len(out) == 0 {
		closeAll()
		return nil, nil, midsag.Rejectf(midsag.ReasonNoInput, "no files found in %s", strings.Join(paths, ", "))
	}
	return out, closeAll, nil
}

func fileSource(path string) midsag.Source {
	return midsag.Source{Name: path, Open: func() (io.ReadCloser, error) { return os.Open(path) }}
}

// isZip reports whether the file starts with a zip local file header.
func isZip(path string) bool {
	f, err := os.Open(path)
	if err != nil {
		return false
	}
	defer f.Close()
	var head [4]byte
	if _, err := io.ReadFull(f, head[:]); err != nil {
		return false
	}
	return bytes.Equal(head[:], []byte("PK\x03\x04"))
}
