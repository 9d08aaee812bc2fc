// Package inputs turns what a user or a client gives midsag (files,
// folders searched recursively, zip archives, multipart bodies) into
// midsag.Sources and instance bytes, with the rules and the one set of
// Limits every entry point shares: hidden files and folders are skipped, a
// zip archive is recognised by its signature whatever its name, and within
// it folders, hidden entries and __MACOSX metadata are skipped; entries,
// parts and bytes are bounded by Limits. The score command collects its
// inputs with Collect; batch discovery reads archives with ZipEntries and
// walks with Walk; the REST upload and STOW-RS read with ZipEntries, Parts
// and ReadEntry.
package inputs

import (
	"archive/zip"
	"bytes"
	"errors"
	"io"
	"io/fs"
	"os"
	"path/filepath"
	"sort"
	"strings"

	"github.com/midsag/midsag"
)

// zipSignature is the local file header signature that starts a zip
// archive (APPNOTE.TXT 4.3.7).
var zipSignature = []byte("PK\x03\x04")

// Hidden reports whether a file or folder name is hidden (starts with a
// dot), which midsag skips.
func Hidden(name string) bool { return strings.HasPrefix(filepath.Base(name), ".") }

// IsZip reports whether head, the first bytes of a file, starts a zip
// archive.
func IsZip(head []byte) bool { return bytes.HasPrefix(head, zipSignature) }

// SkipZipEntry reports whether a zip entry is not an input: a folder, a
// hidden file, or macOS metadata under __MACOSX/.
func SkipZipEntry(zf *zip.File) bool {
	return zf.FileInfo().IsDir() || Hidden(zf.Name) || strings.HasPrefix(zf.Name, "__MACOSX/")
}

// File returns the source of a plain file.
func File(path string) midsag.Source {
	return midsag.Source{Name: path, Open: func() (io.ReadCloser, error) { return os.Open(path) }}
}

// Collect expands paths into one source per file: files as given, folders
// walked recursively in name order following symbolic links (see Walk),
// and zip archives opened entry by entry within lim (ZipEntries). An entry
// of a folder that cannot be read, such as a broken link, becomes a
// source whose Open returns a ReasonNoInput refusal naming it, so it is
// reported rather than skipped silently. The returned function closes the
// archives. A missing path or nothing found is ReasonNoInput, an
// unreadable archive ReasonNotDICOM, one beyond lim ReasonTooLarge.
func Collect(paths []string, lim Limits) ([]midsag.Source, func(), error) {
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
		srcs, closer, err := collectOne(p, lim)
		if closer != nil {
			closers = append(closers, closer)
		}
		if err != nil {
			closeAll()
			return nil, nil, err
		}
		out = append(out, srcs...)
	}
	if len(out) == 0 {
		closeAll()
		return nil, nil, midsag.Rejectf(midsag.ReasonNoInput, "no files found in %s", strings.Join(paths, ", "))
	}
	return out, closeAll, nil
}

// openRefusal is the no_input refusal for a path that cannot be opened,
// said in words for the common causes rather than the system call's text.
func openRefusal(p string, err error) *midsag.Error {
	switch {
	case errors.Is(err, fs.ErrNotExist):
		return midsag.Rejectf(midsag.ReasonNoInput, "%s: no such file or folder", p)
	case errors.Is(err, fs.ErrPermission):
		return midsag.Rejectf(midsag.ReasonNoInput, "%s: permission denied", p)
	}
	return midsag.Reject(midsag.ReasonNoInput, "cannot open input", err)
}

// collectOne expands one path: a folder, a zip archive (with the file to
// close once its entries are read) or a plain file.
func collectOne(p string, lim Limits) ([]midsag.Source, io.Closer, error) {
	st, err := os.Stat(p)
	if err != nil {
		return nil, nil, openRefusal(p, err)
	}
	if st.IsDir() {
		files, err := folder(p)
		return files, nil, err
	}
	if !zipFile(p) {
		return []midsag.Source{File(p)}, nil, nil
	}
	f, err := os.Open(p)
	if err != nil {
		return nil, nil, openRefusal(p, err)
	}
	entries, err := ZipEntries(f, st.Size(), p, lim)
	if err != nil {
		return nil, f, err
	}
	out := make([]midsag.Source, len(entries))
	for i, e := range entries {
		out[i] = e.Source
	}
	return out, f, nil
}

// folder lists the files under p in name order.
func folder(p string) ([]midsag.Source, error) {
	var files []midsag.Source
	err := Walk(p, nil, func(path string, _ fs.FileInfo, err error) error {
		if err != nil {
			// Reported through the source: reading it gives the
			// refusal, which Pipeline.Read counts as a skipped file.
			refusal := midsag.Reject(midsag.ReasonNoInput, "cannot read "+path, err)
			files = append(files, midsag.Source{Name: path, Open: func() (io.ReadCloser, error) { return nil, refusal }})
			return nil
		}
		files = append(files, File(path))
		return nil
	})
	if err != nil {
		return nil, midsag.Reject(midsag.ReasonNoInput, "cannot read folder "+p, err)
	}
	sort.Slice(files, func(i, j int) bool { return files[i].Name < files[j].Name })
	return files, nil
}

// zipFile reports whether the file at path starts with the zip signature.
func zipFile(path string) bool {
	f, err := os.Open(path)
	if err != nil {
		return false
	}
	defer f.Close()
	head := make([]byte, len(zipSignature))
	if _, err := io.ReadFull(f, head); err != nil {
		return false
	}
	return IsZip(head)
}
