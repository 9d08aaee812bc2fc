package inputs

import (
	"archive/zip"
	"io"

	"github.com/midsag/midsag"
)

// Entry is one input entry of a zip archive.
type Entry struct {
	// Source is named "archive!entry"; its Open inflates the entry within
	// the archive's Limits, refusing more with ReasonTooLarge.
	midsag.Source
	// Path is the entry's name inside the archive.
	Path string
	// Index is the entry's 1-based place in the archive's directory.
	Index int
	// Size is the uncompressed size the entry's header declares.
	Size int64
}

// ZipEntries lists the input entries of the zip archive in r (size
// bytes), named after archive: folders, hidden entries and __MACOSX
// metadata are skipped (SkipZipEntry). An archive that cannot be read is
// ReasonNotDICOM; one with more than lim.MaxEntries entries ReasonTooLarge.
// The entries share one budget (lim.MaxTotalBytes, or lim.MaxInflation
// times size when more), so an archive cannot inflate beyond it however
// its entries are read.
func ZipEntries(r io.ReaderAt, size int64, archive string, lim Limits) ([]Entry, error) {
	lim = lim.OrDefault()
	zr, err := zip.NewReader(r, size)
	if err != nil {
		return nil, midsag.Reject(midsag.ReasonNotDICOM, "cannot read zip archive "+archive, err)
	}
	if len(zr.File) > lim.MaxEntries {
		return nil, tooManyEntries("zip archive "+archive, len(zr.File), lim)
	}
	b := newBudget(max(lim.MaxTotalBytes, lim.MaxInflation*size))
	var out []Entry
	for i, zf := range zr.File {
		if SkipZipEntry(zf) {
			continue
		}
		out = append(out, Entry{
			Source: midsag.Source{Name: archive + "!" + zf.Name, Open: openEntry(zf, lim, b)},
			Path:   zf.Name, Index: i + 1, Size: int64(zf.UncompressedSize64),
		})
	}
	return out, nil
}

// openEntry opens zf within the limits: a declared size beyond
// MaxEntryBytes is refused at once, and the reader stops at the limit
// whatever the header says, so a forged size cannot bypass it.
func openEntry(zf *zip.File, lim Limits, b *budget) func() (io.ReadCloser, error) {
	return func() (io.ReadCloser, error) {
		if zf.UncompressedSize64 > uint64(lim.MaxEntryBytes) {
			return nil, midsag.Rejectf(midsag.ReasonTooLarge, "the entry declares %d bytes uncompressed; the limit is %d",
				zf.UncompressedSize64, lim.MaxEntryBytes)
		}
		rc, err := zf.Open()
		if err != nil {
			return nil, midsag.Reject(midsag.ReasonNotDICOM, "the zip entry cannot be opened", err)
		}
		return &limitedEntry{rc: rc, left: lim.MaxEntryBytes, limit: lim.MaxEntryBytes, budget: b}, nil
	}
}
