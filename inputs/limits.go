package inputs

import (
	"io"
	"sync/atomic"

	"github.com/midsag/midsag"
)

// Limits bound what one input may hold, against archive bombs and
// runaway uploads. The same limits apply to zip archives given to score,
// found by batch discovery or uploaded, to multipart/related and STOW-RS
// parts, and to single-instance bodies.
type Limits struct {
	// MaxEntries bounds the entries of one zip archive and the parts of
	// one multipart body.
	MaxEntries int
	// MaxEntryBytes bounds one instance: a zip entry inflated (whatever
	// its header declares), a part, a request body of one instance.
	MaxEntryBytes int64
	// MaxTotalBytes and MaxInflation bound all entries of one zip
	// archive inflated together: to MaxTotalBytes, or to MaxInflation
	// times the archive's own size when that is more, so a large export
	// on disk is read whole while a small archive bomb is not.
	MaxTotalBytes int64
	MaxInflation  int64
	// MaxEntryRatio bounds one zip entry's inflated size to this many
	// times its compressed size, for entries inflating beyond
	// ratioFloor; zero is DefaultLimits'.
	MaxEntryRatio int64
}

// ratioFloor is the inflated size below which an entry's ratio is not
// checked: a small, mostly empty header-only instance may compress far
// better than pixel data does, and cannot cost much. Our choice.
const ratioFloor = 1 << 20

// MaxInstanceBytes is the default bound on one instance at every edge:
// a file, a zip entry, a part, a request body, a C-STORE dataset, and the
// Part 10 stream preprocess reads. Our choice: one MR instance is rarely
// above 64 MiB, and a multi-frame Enhanced MR series of a spine study
// fits well within it.
const MaxInstanceBytes = 256 << 20

// DefaultLimits are the limits every entry point uses unless told
// otherwise. Our choice: a cervical spine MR study has a few hundred to a
// few thousand instances; an archive may inflate to four times the
// service's default 1 GiB upload, or four times its own size (deflate
// rarely shrinks MR images by more, common practice).
var DefaultLimits = Limits{
	MaxEntries:    20000,
	MaxEntryBytes: MaxInstanceBytes,
	MaxTotalBytes: 4 << 30,
	MaxInflation:  4,
	// DEFLATE cannot exceed about 1032:1 (zlib's technical notes, from
	// memory); MR pixel data deflates by a few times (common practice),
	// so 200 leaves a wide margin and stops an entry that is a run of
	// zeros.
	MaxEntryRatio: 200,
}

// OrDefault returns l with every zero field taken from DefaultLimits.
func (l Limits) OrDefault() Limits {
	if l.MaxEntries <= 0 {
		l.MaxEntries = DefaultLimits.MaxEntries
	}
	if l.MaxEntryBytes <= 0 {
		l.MaxEntryBytes = DefaultLimits.MaxEntryBytes
	}
	if l.MaxTotalBytes <= 0 {
		l.MaxTotalBytes = DefaultLimits.MaxTotalBytes
	}
	if l.MaxInflation <= 0 {
		l.MaxInflation = DefaultLimits.MaxInflation
	}
	if l.MaxEntryRatio <= 0 {
		l.MaxEntryRatio = DefaultLimits.MaxEntryRatio
	}
	return l
}

// ReadEntry reads one instance from r, at most lim.MaxEntryBytes; more is
// refused with ReasonTooLarge. Other read errors are returned as they
// are, for the caller to name.
func ReadEntry(r io.Reader, lim Limits) ([]byte, error) {
	lim = lim.OrDefault()
	data, err := io.ReadAll(io.LimitReader(r, lim.MaxEntryBytes+1))
	if err != nil {
		return nil, err
	}
	if int64(len(data)) > lim.MaxEntryBytes {
		return nil, midsag.Rejectf(midsag.ReasonTooLarge, "an instance is larger than the %d-byte limit", lim.MaxEntryBytes)
	}
	return data, nil
}

// ReadSource reads one source whole; a zip entry's Open enforces the
// limits it was listed with (ZipEntries).
func ReadSource(s midsag.Source) ([]byte, error) {
	rc, err := s.Open()
	if err != nil {
		return nil, err
	}
	defer rc.Close()
	return io.ReadAll(rc)
}

// budget is what is left of an archive's MaxTotalBytes, shared by the
// readers of its entries (which may run on several goroutines).
type budget struct {
	left  atomic.Int64
	limit int64
}

func newBudget(limit int64) *budget {
	b := &budget{limit: limit}
	b.left.Store(limit)
	return b
}

// spend takes n bytes and refuses once the archive is spent.
func (b *budget) spend(n int) error {
	if b.left.Add(-int64(n)) < 0 {
		return midsag.Rejectf(midsag.ReasonTooLarge, "the archive inflates beyond the %d-byte limit", b.limit)
	}
	return nil
}

// limitedEntry reads one zip entry within the entry and archive limits.
type limitedEntry struct {
	rc     io.ReadCloser
	left   int64 // bytes this entry may still inflate to
	limit  int64
	budget *budget
}

func (e *limitedEntry) Read(p []byte) (int, error) {
	if int64(len(p)) > e.left+1 {
		p = p[:e.left+1]
	}
	n, err := e.rc.Read(p)
	e.left -= int64(n)
	if e.left < 0 {
		return 0, midsag.Rejectf(midsag.ReasonTooLarge, "the entry inflates beyond the %d-byte limit", e.limit)
	}
	if berr := e.budget.spend(n); berr != nil {
		return 0, berr
	}
	if err != nil && err != io.EOF {
		return n, midsag.Reject(midsag.ReasonTruncated, "the zip entry is damaged", err)
	}
	return n, err
}

func (e *limitedEntry) Close() error { return e.rc.Close() }

// tooManyEntries is the refusal of an archive or body with more than
// lim.MaxEntries entries or parts.
func tooManyEntries(what string, n int, lim Limits) error {
	return midsag.Rejectf(midsag.ReasonTooLarge, "%s has %d entries, above the limit of %d", what, n, lim.MaxEntries)
}
