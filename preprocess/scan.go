package preprocess

import (
	"encoding/binary"
	"fmt"

	"github.com/midsag/midsag"
	"github.com/midsag/midsag/part10"
)

// undefinedLength is the value length 0xFFFFFFFF (PS3.5 7.1.1).
const undefinedLength = 0xFFFFFFFF

// Item and delimiter tags (PS3.5 7.5).
const (
	tagItem          = 0xFFFEE000
	tagItemDelim     = 0xFFFEE00D
	tagSequenceDelim = 0xFFFEE0DD
)

// scanner walks a data set's element headers without decoding values, so
// that every value length is checked against the limits and the bytes that
// remain before the DICOM parser allocates anything.
type scanner struct {
	data     []byte
	explicit bool
	bo       binary.ByteOrder
	maxElem  int64
}

// dataset walks elements from off until end, or until an item delimiter
// when end < 0; it returns the offset after what it consumed.
func (s *scanner) dataset(off, end, depth int) (int, error) {
	if depth > 16 {
		return 0, midsag.Rejectf(midsag.ReasonNotDICOM, "sequences nested deeper than 16 levels")
	}
	limit := len(s.data)
	if end >= 0 {
		limit = end
	}
	for off < limit {
		if off+8 > limit {
			return 0, midsag.Rejectf(midsag.ReasonTruncated, "element header at byte %d runs past the end", off)
		}
		group := uint32(s.bo.Uint16(s.data[off:]))
		elem := uint32(s.bo.Uint16(s.data[off+2:]))
		tag := group<<16 | elem
		if tag == tagItemDelim {
			return off + 8, nil
		}
		vr := ""
		var length uint32
		hdr := 8
		if s.explicit && group != 0xFFFE {
			vr = string(s.data[off+4 : off+6])
			if vr == "OV" || vr == "SV" || vr == "UV" {
				// The DICOM parser (v1.1.0) reads these 64-bit VRs with a
				// 2-byte length, but they have the 4-byte one (PS3.5 Table
				// 7.1-1), so it would lose its place, for example at the
				// Extended Offset Table (7FE0,0001). Relabelled OB, same
				// header layout, the value is read as bytes. The data set
				// is midsag's own copy of the stream.
				s.data[off+4], s.data[off+5] = 'O', 'B'
			}
			if part10.LongVR(vr) {
				if off+12 > limit {
					return 0, midsag.Rejectf(midsag.ReasonTruncated, "element header at byte %d runs past the end", off)
				}
				length = s.bo.Uint32(s.data[off+8:])
				hdr = 12
			} else {
				length = uint32(s.bo.Uint16(s.data[off+6:]))
			}
		} else {
			length = s.bo.Uint32(s.data[off+4:])
		}
		off += hdr
		if length == undefinedLength {
			next, err := s.items(off, depth)
			if err != nil {
				return 0, fmt.Errorf("element (%04X,%04X): %w", group, elem, err)
			}
			off = next
			continue
		}
		if err := s.check(group, elem, int64(length), off, limit); err != nil {
			return 0, err
		}
		if vr == "SQ" {
			if _, err := s.sequence(off, off+int(length), depth); err != nil {
				return 0, err
			}
		}
		off += int(length)
	}
	if end < 0 && depth > 0 {
		return 0, midsag.Rejectf(midsag.ReasonTruncated, "item without its delimiter")
	}
	return off, nil
}

func (s *scanner) check(group, elem uint32, length int64, off, limit int) error {
	if length > s.maxElem {
		return midsag.Rejectf(midsag.ReasonTooLarge, "element (%04X,%04X) is %d bytes, above the %d-byte limit", group, elem, length, s.maxElem)
	}
	if int64(off)+length > int64(limit) {
		return midsag.Rejectf(midsag.ReasonTruncated, "element (%04X,%04X) claims %d bytes but %d remain", group, elem, length, limit-off)
	}
	return nil
}

// itemHeader reads the tag and length of the item header at off (PS3.5
// 7.5); the caller has checked that 8 bytes remain.
func (s *scanner) itemHeader(off int) (uint32, uint32) {
	return uint32(s.bo.Uint16(s.data[off:]))<<16 | uint32(s.bo.Uint16(s.data[off+2:])), s.bo.Uint32(s.data[off+4:])
}

// sequence walks the items of a defined-length sequence.
func (s *scanner) sequence(off, end, depth int) (int, error) {
	for off < end {
		if off+8 > end {
			return 0, midsag.Rejectf(midsag.ReasonTruncated, "item header runs past its sequence")
		}
		tag, length := s.itemHeader(off)
		off += 8
		if tag != tagItem {
			return 0, midsag.Rejectf(midsag.ReasonNotDICOM, "expected an item tag in a sequence, found (%08X)", tag)
		}
		if length == undefinedLength {
			next, err := s.dataset(off, -1, depth+1)
			if err != nil {
				return 0, err
			}
			off = next
			continue
		}
		if err := s.check(0xFFFE, 0xE000, int64(length), off, end); err != nil {
			return 0, err
		}
		if _, err := s.dataset(off, off+int(length), depth+1); err != nil {
			return 0, err
		}
		off += int(length)
	}
	return off, nil
}

// items walks an undefined-length value: sequence items holding data sets,
// or encapsulated pixel data fragments (PS3.5 A.4), up to the sequence
// delimiter.
func (s *scanner) items(off, depth int) (_ int, err error) {
	for {
		if off+8 > len(s.data) {
			return 0, midsag.Rejectf(midsag.ReasonTruncated, "undefined-length value without its sequence delimiter")
		}
		tag, length := s.itemHeader(off)
		off += 8
		switch tag {
		case tagSequenceDelim:
			return off, nil
		case tagItem:
		default:
			return 0, midsag.Rejectf(midsag.ReasonNotDICOM, "expected an item in an undefined-length value, found (%08X)", tag)
		}
		if length == undefinedLength {
			if off, err = s.dataset(off, -1, depth+1); err != nil {
				return 0, err
			}
			continue
		}
		if err := s.check(0xFFFE, 0xE000, int64(length), off, len(s.data)); err != nil {
			return 0, err
		}
		// A defined-length item is either a nested data set or a pixel
		// fragment; its bytes are in range, which is all the scan needs.
		off += int(length)
	}
}
