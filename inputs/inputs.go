// Package inputs turns what a user points midsag at (files, folders
// searched recursively, zip archives) into midsag.Sources, with the rules
// every entry point shares: hidden files and folders are skipped, a zip
// archive is recognised by its signature whatever its name, and within
// it folders, hidden entries and __MACOSX metadata are skipped, at most
// MaxZipEntries entries per archive. The score command collects its
// inputs here; batch discovery and the REST upload apply the same rules.
package inputs

import (
	"archive/zip"
	"bytes"
	"io"
	"io/fs"
	"os"
	"path/filepath"
	"sort"
	"strings"

	"github.com/midsag/midsag"
)

// MaxZipEntries bounds the entries read from one zip archive, against
// archive bombs: a cervical spine MR study has a few hundred to a few
// thousand instances (our choice).
const MaxZipEntries = 20000

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
// and zip archives opened entry by entry. An entry of a folder that
// cannot be read, such as a broken link, becomes a source whose Open
// returns a ReasonNoInput refusal naming it, so it is reported rather than
// skipped silently. The returned function closes the archives. A missing path or
// nothing found is ReasonNoInput, an unreadable archive ReasonNotDICOM,
// one with too many entries ReasonTooLarge.
func Collect(paths []string) ([]midsag.Source, func(), error) {
	var (
		out     []midsag.Source
		closers []io.Closer
	)
	closeAll := func() {
		for _, c := range closers {
			c.Close()
		}
	}
	fail := func(err error) ([]midsag.Source, func(), error) {
		closeAll()
		return nil, nil, err
	}
	for _, p := range paths {
		st, err := os.Stat(p)
		if err != nil {
			return fail(midsag.Reject(midsag.ReasonNoInput, "cannot open input", err))
		}
		if st.IsDir() {
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
				return fail(midsag.Reject(midsag.ReasonNoInput, "cannot read folder "+p, err))
			}
			sort.Slice(files, func(i, j int) bool { return files[i].Name < files[j].Name })
			out = append(out, files...)
			continue
		}
		if !zipFile(p) {
			out = append(out, File(p))
			continue
		}
		zr, err := zip.OpenReader(p)
		if err != nil {
			return fail(midsag.Reject(midsag.ReasonNotDICOM, "cannot read zip archive "+p, err))
		}
		closers = append(closers, zr)
		if len(zr.File) > MaxZipEntries {
			return fail(midsag.Rejectf(midsag.ReasonTooLarge, "zip archive %s has %d entries, above the limit of %d", p, len(zr.File), MaxZipEntries))
		}
		for _, zf := range zr.File {
			if !SkipZipEntry(zf) {
				out = append(out, midsag.Source{Name: p + "!" + zf.Name, Open: zf.Open})
			}
		}
	}
	if len(out) == 0 {
		return fail(midsag.Rejectf(midsag.ReasonNoInput, "no files found in %s", strings.Join(paths, ", ")))
	}
	return out, closeAll, nil
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
