package preprocess

import (
	"encoding/binary"
	"errors"
	"fmt"
	"io"

	"github.com/midsag/midsag"
	"github.com/midsag/midsag/part10"
)

// headerChunk is the first read of ReadHeader: two pages. Scanner headers
// are a few KiB up to a few tens of KiB (private tags, CSA headers); the
// read doubles until Pixel Data is reached. Common practice, no single
// source.
const headerChunk = 8 << 10

// tagPixelData is (7FE0,0010), where ReadHeader stops.
const tagPixelData = 0x7FE00010

// ReadHeader parses one DICOM Part 10 stream of size bytes up to, and not
// including, the value of Pixel Data (7FE0,0010), so that a cohort can be
// indexed without reading pixel bytes. If r is an io.ReaderAt (an *os.File)
// the pixel bytes are never read from disk: the header is read in growing
// chunks from offset 0 and the Pixel Data length is checked against size.
//
// The limits and reason codes are those of Read. The returned Instance has
// no pixel data. When the header parses but Pixel Data runs past the end of
// the stream, ReadHeader returns the Instance together with the truncated
// refusal, so the caller still knows which study the broken file belongs
// to.
func (p *Preprocessor) ReadHeader(name string, r io.Reader, size int64) (*midsag.Instance, error) {
	lim := p.opts.Limits
	if size > lim.MaxFileBytes {
		return nil, midsag.Rejectf(midsag.ReasonTooLarge, "file is larger than the %d-byte limit", lim.MaxFileBytes)
	}
	pr := &prefixReader{r: r}
	n := min(int64(headerChunk), size)
	for {
		data, err := pr.prefix(n)
		if err != nil {
			return nil, fmt.Errorf("read header of %s: %w", name, err)
		}
		complete := int64(len(data)) < n || int64(len(data)) >= size
		h, err := locatePixelData(data, p.opts.Lenient)
		switch {
		case err == nil:
			return p.headerAt(data, h, pr, size)
		case errors.Is(err, errNeedMore) && !complete:
			n = min(2*n, size)
		case errors.Is(err, errWholeFile) && !complete:
			// A deflated data set cannot be walked without inflating it.
			n = size
		default:
			// The whole stream is in memory (or what is there decides the
			// refusal, as with a missing DICM prefix): parse it as Read does.
			inst, err := p.parse(data)
			if err != nil {
				return nil, err
			}
			inst.PixelData, inst.Fragments = nil, nil
			return inst, nil
		}
	}
}

// headerAt parses the data set before Pixel Data and checks the Pixel Data
// element's length against the stream size without reading its value.
func (p *Preprocessor) headerAt(data []byte, h pixelHeader, pr *prefixReader, size int64) (*midsag.Instance, error) {
	var length uint32
	if h.explicit {
		length = h.bo.Uint32(data[h.off+8:])
	} else {
		length = h.bo.Uint32(data[h.off+4:])
	}
	valueAt := int64(h.off + h.hdr)
	var cut error
	switch {
	case length == undefinedLength:
		cut = pr.checkFragments(valueAt, size, h.bo)
	case int64(length) > p.opts.Limits.MaxElementBytes:
		return nil, midsag.Rejectf(midsag.ReasonTooLarge, "element (7FE0,0010) is %d bytes, above the %d-byte limit", length, p.opts.Limits.MaxElementBytes)
	case valueAt+int64(length) > size:
		cut = midsag.Rejectf(midsag.ReasonTruncated, "element (7FE0,0010) claims %d bytes but %d remain", length, size-valueAt)
	}
	inst, err := p.parse(data[:h.off])
	if err != nil {
		return nil, err
	}
	return inst, cut
}

// errNeedMore and errWholeFile tell ReadHeader to read a longer prefix;
// errParseNow, that the bytes read already decide the refusal.
var (
	errNeedMore  = errors.New("header runs past the bytes read")
	errWholeFile = errors.New("header cannot be walked without the whole stream")
	errParseNow  = errors.New("prefix decides the refusal")
)

// pixelHeader locates the Pixel Data element in a prefix of a stream.
type pixelHeader struct {
	off, hdr int // element start and header length
	explicit bool
	bo       binary.ByteOrder
}

// locatePixelData finds the top-level Pixel Data element in data, which
// holds the first bytes of a Part 10 stream, framed as parse frames it
// (framing). Any other outcome than
// success means: read more, or parse what there is.
func locatePixelData(data []byte, lenient bool) (pixelHeader, error) {
	if len(data) < 132 {
		return pixelHeader{}, errNeedMore
	}
	m, err := framing(data, lenient)
	if r, _ := midsag.ReasonOf(err); r == midsag.ReasonNotDICOM {
		// parse refuses these bytes whatever follows them.
		return pixelHeader{}, errParseNow
	} else if err != nil {
		return pixelHeader{}, errNeedMore
	}
	if m.transferSyntax == midsag.DeflatedExplicitVRLittleEndian {
		return pixelHeader{}, errWholeFile
	}
	w := walker{data: data, explicit: m.transferSyntax != midsag.ImplicitVRLittleEndian, bo: binary.LittleEndian}
	if m.transferSyntax == midsag.ExplicitVRBigEndian {
		w.bo = binary.BigEndian
	}
	off, hdr, err := w.pixelData(m.bodyOffset)
	if err != nil {
		return pixelHeader{}, err
	}
	return pixelHeader{off: off, hdr: hdr, explicit: w.explicit, bo: w.bo}, nil
}

// walker skips data set elements in a prefix without checking limits
// (parse checks them on the bytes before Pixel Data).
type walker struct {
	data     []byte
	explicit bool
	bo       binary.ByteOrder
}

// pixelData returns the offset and header length of the top-level Pixel
// Data element (7FE0,0010), walking from off; errNeedMore when the bytes
// end first.
func (w walker) pixelData(off int) (at, hdr int, err error) {
	for {
		if off+12 > len(w.data) {
			return 0, 0, errNeedMore
		}
		if uint32(w.bo.Uint16(w.data[off:]))<<16|uint32(w.bo.Uint16(w.data[off+2:])) == tagPixelData {
			if w.explicit {
				return off, 12, nil
			}
			return off, 8, nil
		}
		if off, err = w.element(off, 0); err != nil {
			return 0, 0, err
		}
	}
}

// element skips the element at off and returns the offset after it.
func (w walker) element(off, depth int) (int, error) {
	if depth > 16 || off+8 > len(w.data) {
		return 0, errNeedMore
	}
	group := w.bo.Uint16(w.data[off:])
	var length uint32
	hdr := 8
	if w.explicit && group != 0xFFFE {
		if part10.LongVR(string(w.data[off+4 : off+6])) {
			if off+12 > len(w.data) {
				return 0, errNeedMore
			}
			length, hdr = w.bo.Uint32(w.data[off+8:]), 12
		} else {
			length = uint32(w.bo.Uint16(w.data[off+6:]))
		}
	} else {
		length = w.bo.Uint32(w.data[off+4:])
	}
	off += hdr
	if length != undefinedLength {
		return off + int(length), nil
	}
	// Undefined length: items up to the sequence delimiter (PS3.5 7.5).
	for {
		if off+8 > len(w.data) {
			return 0, errNeedMore
		}
		tag := uint32(w.bo.Uint16(w.data[off:]))<<16 | uint32(w.bo.Uint16(w.data[off+2:]))
		ilen := w.bo.Uint32(w.data[off+4:])
		off += 8
		switch {
		case tag == tagSequenceDelim:
			return off, nil
		case tag != tagItem:
			// Not a well-formed value: let parse name the refusal.
			return 0, errWholeFile
		case ilen != undefinedLength:
			off += int(ilen)
		default:
			for {
				if off+8 > len(w.data) {
					return 0, errNeedMore
				}
				t := uint32(w.bo.Uint16(w.data[off:]))<<16 | uint32(w.bo.Uint16(w.data[off+2:]))
				if t == tagItemDelim {
					off += 8
					break
				}
				var err error
				if off, err = w.element(off, depth+1); err != nil {
					return 0, err
				}
			}
		}
	}
}

// prefixReader returns ever longer prefixes of a stream, with ReadAt when
// the stream has it so that nothing past the prefix is read.
type prefixReader struct {
	r   io.Reader
	buf []byte
}

func (p *prefixReader) prefix(n int64) ([]byte, error) {
	old := len(p.buf)
	if int64(old) >= n {
		return p.buf[:n], nil
	}
	p.buf = append(p.buf, make([]byte, int(n)-old)...)
	var (
		got int
		err error
	)
	if ra, ok := p.r.(io.ReaderAt); ok {
		got, err = ra.ReadAt(p.buf[old:], int64(old))
	} else {
		got, err = io.ReadFull(p.r, p.buf[old:])
	}
	p.buf = p.buf[:old+got]
	if errors.Is(err, io.EOF) || errors.Is(err, io.ErrUnexpectedEOF) {
		// Shorter than its stated size: the caller sees a short prefix.
		err = nil
	}
	return p.buf, err
}

// checkFragments walks the item headers of encapsulated Pixel Data (PS3.5
// A.4) with ReadAt, eight bytes per fragment, and refuses the stream as
// truncated if a fragment or the delimiter lies past size. A stream without
// ReadAt is not checked here; decoding checks it if the series is picked.
func (p *prefixReader) checkFragments(off, size int64, bo binary.ByteOrder) error {
	ra, ok := p.r.(io.ReaderAt)
	if !ok {
		return nil
	}
	var h [8]byte
	for {
		if off+8 > size {
			return midsag.Rejectf(midsag.ReasonTruncated, "encapsulated pixel data without its sequence delimiter")
		}
		if _, err := ra.ReadAt(h[:], off); err != nil {
			return midsag.Reject(midsag.ReasonTruncated, "encapsulated pixel data is cut short", err)
		}
		tag := uint32(bo.Uint16(h[:]))<<16 | uint32(bo.Uint16(h[2:]))
		length := bo.Uint32(h[4:])
		off += 8
		switch {
		case tag == tagSequenceDelim:
			return nil
		case tag != tagItem || length == undefinedLength:
			return midsag.Rejectf(midsag.ReasonNotDICOM, "expected a fragment item in encapsulated pixel data, found (%08X)", tag)
		case off+int64(length) > size:
			return midsag.Rejectf(midsag.ReasonTruncated, "pixel data fragment claims %d bytes but %d remain", length, size-off)
		}
		off += int64(length)
	}
}
