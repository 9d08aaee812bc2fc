package inputs

import (
	"archive/zip"
	"bytes"
	"compress/flate"
	"encoding/binary"
	"errors"
	"hash/crc32"
	"io"
	"math/rand/v2"
	"mime/multipart"
	"net/textproto"
	"strings"
	"testing"

	"github.com/midsag/midsag"
)

// zipOf builds an archive in memory; each entry is stored deflated
// (APPNOTE.TXT 4.4.5 method 8). With forged, every header declares 10
// bytes uncompressed whatever the entry holds, as a bomb would.
func zipOf(t *testing.T, forged bool, entries map[string][]byte) *bytes.Reader {
	t.Helper()
	var buf bytes.Buffer
	zw := zip.NewWriter(&buf)
	for name, data := range entries {
		var comp bytes.Buffer
		fw, _ := flate.NewWriter(&comp, flate.BestCompression)
		fw.Write(data)
		fw.Close()
		h := &zip.FileHeader{Name: name, Method: zip.Deflate, CRC32: crc32.ChecksumIEEE(data),
			CompressedSize64: uint64(comp.Len()), UncompressedSize64: uint64(len(data))}
		if forged {
			h.UncompressedSize64 = 10
		}
		w, err := zw.CreateRaw(h)
		if err != nil {
			t.Fatal(err)
		}
		w.Write(comp.Bytes())
	}
	if err := zw.Close(); err != nil {
		t.Fatal(err)
	}
	return bytes.NewReader(buf.Bytes())
}

func wantReason(t *testing.T, what string, err error, want midsag.Reason) {
	t.Helper()
	if r, ok := midsag.ReasonOf(err); !ok || r != want {
		t.Errorf("%s: %v, want reason %s", what, err, want)
	}
}

// TestZipEntryLimits: an entry declaring more than MaxEntryBytes is
// refused at Open; one whose header lies (declares 10 bytes, inflates to
// 64 KiB) is refused without reading past the limit (Go's archive/zip
// itself stops at the declared size with zip.ErrFormat, refused here as
// truncated); an entry within the limit reads whole.
func TestZipEntryLimits(t *testing.T) {
	lim := Limits{MaxEntries: 10, MaxEntryBytes: 4096, MaxTotalBytes: 1 << 20}
	big := bytes.Repeat([]byte{0}, 64<<10)
	small := []byte("a small DICOM-sized entry")

	r := zipOf(t, false, map[string][]byte{"big": big, "small": small})
	entries, err := ZipEntries(r, r.Size(), "honest.zip", lim)
	if err != nil || len(entries) != 2 {
		t.Fatalf("%d entries, %v", len(entries), err)
	}
	for _, e := range entries {
		data, err := ReadSource(e.Source)
		switch e.Path {
		case "big":
			wantReason(t, "declared too large", err, midsag.ReasonTooLarge)
		case "small":
			if err != nil || !bytes.Equal(data, small) || e.Name != "honest.zip!small" {
				t.Errorf("small entry %q: %q, %v", e.Name, data, err)
			}
		}
	}

	r = zipOf(t, true, map[string][]byte{"bomb": big})
	entries, err = ZipEntries(r, r.Size(), "forged.zip", lim)
	if err != nil {
		t.Fatal(err)
	}
	data, err := ReadSource(entries[0].Source)
	wantReason(t, "forged size", err, midsag.ReasonTruncated)
	if !errors.Is(err, zip.ErrFormat) {
		t.Errorf("forged size: %v, want archive/zip's ErrFormat as the cause", err)
	}
	if len(data) > int(lim.MaxEntryBytes)+1 {
		t.Errorf("read %d bytes past a %d-byte limit", len(data), lim.MaxEntryBytes)
	}
}

// TestZipTotalBudget: entries each within MaxEntryBytes but together
// beyond MaxTotalBytes (and beyond MaxInflation times the archive's
// size, here far less) are refused once the budget is spent.
func TestZipTotalBudget(t *testing.T) {
	lim := Limits{MaxEntries: 10, MaxEntryBytes: 4096, MaxTotalBytes: 10000, MaxInflation: 1}
	files := map[string][]byte{}
	for _, n := range []string{"a", "b", "c"} {
		files[n] = bytes.Repeat([]byte(n), 4000)
	}
	r := zipOf(t, false, files)
	entries, err := ZipEntries(r, r.Size(), "three.zip", lim)
	if err != nil {
		t.Fatal(err)
	}
	var errs []error
	for _, e := range entries {
		if _, err := ReadSource(e.Source); err != nil {
			errs = append(errs, err)
		}
	}
	if len(errs) != 1 {
		t.Fatalf("%d entries refused, want the third only: %v", len(errs), errs)
	}
	wantReason(t, "third entry", errs[0], midsag.ReasonTooLarge)
}

// TestZipInflationAllowance: a large archive may inflate to MaxInflation
// times its own size even above MaxTotalBytes. The entries are random
// bytes, which deflate cannot shrink, so the archive is about as large as
// its contents.
func TestZipInflationAllowance(t *testing.T) {
	rnd := make([]byte, 3*4000)
	rand.NewChaCha8([32]byte{1}).Read(rnd)
	files := map[string][]byte{"a": rnd[:4000], "b": rnd[4000:8000], "c": rnd[8000:]}
	r := zipOf(t, false, files)
	lim := Limits{MaxEntries: 10, MaxEntryBytes: 4096, MaxTotalBytes: 1000, MaxInflation: 2}
	entries, err := ZipEntries(r, r.Size(), "incompressible.zip", lim)
	if err != nil {
		t.Fatal(err)
	}
	for _, e := range entries {
		if _, err := ReadSource(e.Source); err != nil {
			t.Errorf("%s within twice the archive's size: %v", e.Path, err)
		}
	}
}

func TestZipEntryCount(t *testing.T) {
	r := zipOf(t, false, map[string][]byte{"a": {1}, "b": {2}, "c": {3}})
	_, err := ZipEntries(r, r.Size(), "three.zip", Limits{MaxEntries: 2})
	wantReason(t, "three entries, limit two", err, midsag.ReasonTooLarge)
	_, err = ZipEntries(strings.NewReader("PK\x03\x04 no"), 7, "junk.zip", DefaultLimits)
	wantReason(t, "not a zip", err, midsag.ReasonNotDICOM)
}

// related builds a multipart/related body (RFC 2387) of parts.
func related(t *testing.T, parts ...[]byte) *multipart.Reader {
	t.Helper()
	var buf bytes.Buffer
	mw := multipart.NewWriter(&buf)
	for _, p := range parts {
		w, err := mw.CreatePart(textproto.MIMEHeader{"Content-Type": {"application/dicom"}})
		if err != nil {
			t.Fatal(err)
		}
		w.Write(p)
	}
	mw.Close()
	return multipart.NewReader(&buf, mw.Boundary())
}

func TestPartsLimits(t *testing.T) {
	lim := Limits{MaxEntries: 2, MaxEntryBytes: 8}
	var got []string
	err := Parts(related(t, []byte("one"), []byte("two")), lim, func(n int, p *multipart.Part, r io.Reader) error {
		data, err := io.ReadAll(r)
		got = append(got, string(data)+"/"+p.Header.Get("Content-Type"))
		return err
	})
	if err != nil || strings.Join(got, ",") != "one/application/dicom,two/application/dicom" {
		t.Errorf("parts %v, %v", got, err)
	}
	none := func(_ int, _ *multipart.Part, r io.Reader) error { _, err := io.ReadAll(r); return err }
	wantReason(t, "three parts, limit two", Parts(related(t, []byte("1"), []byte("2"), []byte("3")), lim, none), midsag.ReasonTooLarge)
	err = Parts(related(t, []byte("far more than eight bytes")), lim, none)
	wantReason(t, "part beyond MaxEntryBytes", err, midsag.ReasonTooLarge)
	if e := midsag.RefusalOf(err); e == nil || e.Details["source"] != "part 1" {
		t.Errorf("refusal %v does not name part 1", err)
	}
	broken := multipart.NewReader(strings.NewReader("--b\r\nContent-Type: application/dicom\r\n\r\nno end"), "b")
	wantReason(t, "body without its closing boundary", Parts(broken, lim, none), midsag.ReasonTruncated)
}

func TestReadEntry(t *testing.T) {
	lim := Limits{MaxEntryBytes: 4}
	if b, err := ReadEntry(strings.NewReader("abcd"), lim); err != nil || string(b) != "abcd" {
		t.Errorf("at the limit: %q, %v", b, err)
	}
	_, err := ReadEntry(strings.NewReader("abcde"), lim)
	wantReason(t, "one byte over", err, midsag.ReasonTooLarge)
}

// TestZipEntryRatio: an entry of 4 MiB of zeros deflates about 1000 to 1
// (DEFLATE's bound is near 1032:1, zlib's technical notes, from memory),
// beyond MaxEntryRatio, and is refused at Open, also when its header
// forges a small uncompressed size (the reader stops at the ratio's
// limit). Random bytes of the same size, which deflate cannot shrink,
// read whole.
func TestZipEntryRatio(t *testing.T) {
	lim := Limits{MaxEntries: 10, MaxEntryBytes: 8 << 20, MaxTotalBytes: 64 << 20, MaxEntryRatio: 200}
	zeros := make([]byte, 4<<20)
	rnd := make([]byte, 4<<20)
	rand.NewChaCha8([32]byte{2}).Read(rnd)
	r := zipOf(t, false, map[string][]byte{"zeros": zeros, "random": rnd})
	entries, err := ZipEntries(r, r.Size(), "ratio.zip", lim)
	if err != nil {
		t.Fatal(err)
	}
	for _, e := range entries {
		data, err := ReadSource(e.Source)
		switch e.Path {
		case "zeros":
			wantReason(t, "zeros beyond the ratio", err, midsag.ReasonTooLarge)
		case "random":
			if err != nil || len(data) != len(rnd) {
				t.Errorf("random entry: %d bytes, %v", len(data), err)
			}
		}
	}
	r = zipOf(t, true, map[string][]byte{"zeros": zeros})
	entries, err = ZipEntries(r, r.Size(), "forged-ratio.zip", lim)
	if err != nil {
		t.Fatal(err)
	}
	data, err := ReadSource(entries[0].Source)
	if err == nil || len(data) > 2<<20 {
		t.Errorf("forged ratio: read %d bytes, %v; want a refusal within the 1 MiB floor", len(data), err)
	}
}

// TestZipOverlappingEntries: an archive whose central directory lists the
// same local entry twice (the shape of a bomb of many entries over one
// stream) is refused as too_large before any entry inflates; the honest
// archive it was made from is accepted. Record layouts from APPNOTE.TXT
// 4.3.12 (central directory header, 46 bytes before the name) and 4.3.16
// (end of central directory, 22 bytes).
func TestZipOverlappingEntries(t *testing.T) {
	honest := zipOf(t, false, map[string][]byte{"a": []byte("one instance")})
	b := make([]byte, honest.Size())
	honest.ReadAt(b, 0)
	eocd := len(b) - 22
	cdSize := binary.LittleEndian.Uint32(b[eocd+12:])
	cdOff := binary.LittleEndian.Uint32(b[eocd+16:])
	cd := b[cdOff : cdOff+cdSize]
	dup := bytes.Clone(cd)
	dup[46] = 'b' // the same data under another name
	crafted := append(append(append(bytes.Clone(b[:cdOff]), cd...), dup...), b[eocd:]...)
	end := crafted[len(crafted)-22:]
	binary.LittleEndian.PutUint16(end[8:], 2)
	binary.LittleEndian.PutUint16(end[10:], 2)
	binary.LittleEndian.PutUint32(end[12:], 2*cdSize)
	if _, err := ZipEntries(honest, honest.Size(), "honest.zip", DefaultLimits); err != nil {
		t.Fatalf("honest archive: %v", err)
	}
	zr, err := zip.NewReader(bytes.NewReader(crafted), int64(len(crafted)))
	if err != nil || len(zr.File) != 2 {
		t.Fatalf("crafted archive does not list two entries: %v", err)
	}
	_, err = ZipEntries(bytes.NewReader(crafted), int64(len(crafted)), "crafted.zip", DefaultLimits)
	wantReason(t, "two entries over one stream", err, midsag.ReasonTooLarge)
}
