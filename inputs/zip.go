package inputs

import (
	"archive/zip"
	"cmp"
	"errors"
	"fmt"
	"io"
	"slices"

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
	if err := overlapping(zr.File); err != nil {
		return nil, midsag.Reject(midsag.ReasonTooLarge, "zip archive "+archive+" is refused", err)
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

// overlapping refuses an archive two of whose entries share compressed
// bytes: an honest archive never does, and a bomb made of many entries
// pointing at one stream inflates it once per entry.
func overlapping(files []*zip.File) error {
	type span struct{ start, end int64 }
	spans := make([]span, 0, len(files))
	for _, zf := range files {
		off, err := zf.DataOffset()
		if err != nil {
			return fmt.Errorf("entry %s: %w", zf.Name, err)
		}
		spans = append(spans, span{off, off + int64(zf.CompressedSize64)})
	}
	slices.SortFunc(spans, func(a, b span) int { return cmp.Compare(a.start, b.start) })
	for i := 1; i < len(spans); i++ {
		if spans[i].start < spans[i-1].end {
			return errors.New("two entries overlap: the archive is crafted, not made by an archiver")
		}
	}
	return nil
}

// entryLimit is what zf may inflate to: MaxEntryBytes, and
// MaxEntryRatio times its compressed size above ratioFloor.
func entryLimit(zf *zip.File, lim Limits) int64 {
	byRatio := max(ratioFloor, lim.MaxEntryRatio*int64(min(zf.CompressedSize64, uint64(lim.MaxEntryBytes))))
	return min(lim.MaxEntryBytes, byRatio)
}

// openEntry opens zf within the limits: a compressed or declared
// uncompressed size beyond MaxEntryBytes, or a declared ratio beyond
// MaxEntryRatio, is refused at once, and the reader stops at the limit
// whatever the header says, so a forged size cannot bypass it.
func openEntry(zf *zip.File, lim Limits, b *budget) func() (io.ReadCloser, error) {
	return func() (io.ReadCloser, error) {
		if zf.CompressedSize64 > uint64(lim.MaxEntryBytes) {
			return nil, midsag.Rejectf(midsag.ReasonTooLarge, "the entry holds %d compressed bytes; the limit is %d",
				zf.CompressedSize64, lim.MaxEntryBytes)
		}
		limit := entryLimit(zf, lim)
		if zf.UncompressedSize64 > uint64(limit) {
			return nil, midsag.Rejectf(midsag.ReasonTooLarge, "the entry declares %d bytes uncompressed from %d; the limit is %d (at most %d bytes, %d times its compressed size)",
				zf.UncompressedSize64, zf.CompressedSize64, limit, lim.MaxEntryBytes, lim.MaxEntryRatio)
		}
		rc, err := zf.Open()
		if err != nil {
			return nil, midsag.Reject(midsag.ReasonNotDICOM, "the zip entry cannot be opened", err)
		}
		return &limitedEntry{rc: rc, left: limit, limit: limit, budget: b}, nil
	}
}
