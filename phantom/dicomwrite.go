package phantom

import (
	"bytes"
	"compress/flate"
	"encoding/binary"
	"fmt"
	"math"
	"sort"
	"strconv"
	"strings"

	"github.com/midsag/midsag"
	"github.com/midsag/midsag/part10"
)

const (
	implementationVersion   = "MIDSAG_PHANTOM1"
	implementationClassSeed = "midsag phantom implementation class"
)

// element is one data element of the dataset being written. Exactly one of
// the value fields is used, chosen by vr.
type element struct {
	tag  uint32
	vr   string
	str  string    // text VRs, multiple values already joined with '\'
	u16  []uint16  // US, and OW pixel data
	u32  []uint32  // UL
	raw  []byte    // OB
	frag [][]byte  // encapsulated pixel data fragments (PS3.5 A.4)
	bot  []uint32  // Basic Offset Table of frag; empty when nil
	f64  []float64 // FD
	// items are the items of an SQ element, each a dataset.
	items []dataset
}

// dataset collects elements in any order; encode sorts them by tag as
// PS3.5 7.1 requires.
type dataset []element

func (d *dataset) text(tag uint32, vr, s string) {
	*d = append(*d, element{tag: tag, vr: vr, str: s})
}
func (d *dataset) us(tag uint32, v ...uint16) { *d = append(*d, element{tag: tag, vr: "US", u16: v}) }
func (d *dataset) ds(tag uint32, v ...float64) {
	s := make([]string, len(v))
	for i, x := range v {
		s[i] = formatDS(x)
	}
	d.text(tag, "DS", strings.Join(s, `\`))
}
func (d *dataset) is(tag uint32, v int) { d.text(tag, "IS", strconv.Itoa(v)) }

// formatDS writes a Decimal String of at most 16 bytes (PS3.5 6.2).
func formatDS(x float64) string {
	if x == 0 {
		return "0" // avoids "-0"
	}
	for prec := 10; prec > 0; prec-- {
		s := strconv.FormatFloat(x, 'f', prec, 64)
		s = strings.TrimRight(strings.TrimRight(s, "0"), ".")
		if len(s) <= 16 {
			return s
		}
	}
	return strconv.FormatFloat(math.Round(x), 'f', 0, 64)
}

// longLength reports the VRs with a 2-byte reserved field and a 4-byte
// length in explicit VR encodings (PS3.5 7.1.2, Table 7.1-1).
func longLength(vr string) bool {
	switch vr {
	case "OB", "OD", "OF", "OL", "OV", "OW", "SQ", "SV", "UC", "UN", "UR", "UT", "UV":
		return true
	}
	return false
}

// padded returns the value bytes of a text element padded to even length:
// UI with a NUL, other text VRs with a space (PS3.5 6.2, 9.1).
func padded(vr, s string) []byte {
	b := []byte(s)
	if len(b)%2 == 1 {
		if vr == "UI" {
			b = append(b, 0)
		} else {
			b = append(b, ' ')
		}
	}
	return b
}

// encoder writes elements in one of the three uncompressed encodings.
type encoder struct {
	buf      bytes.Buffer
	explicit bool
	order    binary.ByteOrder
}

func (e *encoder) u16(v uint16) {
	var b [2]byte
	e.order.PutUint16(b[:], v)
	e.buf.Write(b[:])
}

func (e *encoder) u32(v uint32) {
	var b [4]byte
	e.order.PutUint32(b[:], v)
	e.buf.Write(b[:])
}

func (e *encoder) header(tag uint32, vr string, length uint32) {
	e.u16(uint16(tag >> 16))
	e.u16(uint16(tag))
	if !e.explicit {
		e.u32(length)
		return
	}
	e.buf.WriteString(vr)
	if longLength(vr) {
		e.u16(0)
		e.u32(length)
		return
	}
	e.u16(uint16(length))
}

func (e *encoder) element(el element) error {
	switch {
	case el.frag != nil:
		// Encapsulated pixel data: undefined length, an empty Basic Offset
		// Table item, one fragment per frame, then a Sequence Delimitation
		// Item (PS3.5 A.4). Item tags keep the syntax's byte order, which
		// is little endian for every encapsulated syntax.
		e.header(el.tag, "OB", 0xFFFFFFFF)
		e.u16(0xFFFE)
		e.u16(0xE000)
		e.u32(uint32(4 * len(el.bot)))
		for _, o := range el.bot {
			e.u32(o)
		}
		for _, f := range el.frag {
			e.u16(0xFFFE)
			e.u16(0xE000)
			n := len(f) + len(f)%2
			e.u32(uint32(n))
			e.buf.Write(f)
			if len(f)%2 == 1 {
				e.buf.WriteByte(0)
			}
		}
		e.u16(0xFFFE)
		e.u16(0xE0DD)
		e.u32(0)
	case el.vr == "SQ":
		// Undefined-length sequence of undefined-length items, each ended
		// by an Item Delimitation Item, the sequence by a Sequence
		// Delimitation Item (PS3.5 7.5.2).
		e.header(el.tag, "SQ", 0xFFFFFFFF)
		for _, it := range el.items {
			e.u16(0xFFFE)
			e.u16(0xE000)
			e.u32(0xFFFFFFFF)
			sorted := append(dataset(nil), it...)
			sort.SliceStable(sorted, func(i, j int) bool { return sorted[i].tag < sorted[j].tag })
			for _, c := range sorted {
				if err := e.element(c); err != nil {
					return err
				}
			}
			e.u16(0xFFFE)
			e.u16(0xE00D)
			e.u32(0)
		}
		e.u16(0xFFFE)
		e.u16(0xE0DD)
		e.u32(0)
	case el.u16 != nil:
		e.header(el.tag, el.vr, uint32(2*len(el.u16)))
		// OW and US are 16-bit words: swapped in big endian (PS3.5 7.3).
		b := make([]byte, 2*len(el.u16))
		for i, v := range el.u16 {
			e.order.PutUint16(b[2*i:], v)
		}
		e.buf.Write(b)
	case el.u32 != nil:
		e.header(el.tag, el.vr, uint32(4*len(el.u32)))
		for _, v := range el.u32 {
			e.u32(v)
		}
	case el.f64 != nil:
		e.header(el.tag, el.vr, uint32(8*len(el.f64)))
		for _, v := range el.f64 {
			var b [8]byte
			e.order.PutUint64(b[:], math.Float64bits(v))
			e.buf.Write(b[:])
		}
	case el.raw != nil:
		n := len(el.raw) + len(el.raw)%2
		e.header(el.tag, el.vr, uint32(n))
		e.buf.Write(el.raw)
		if len(el.raw)%2 == 1 {
			e.buf.WriteByte(0)
		}
	default:
		b := padded(el.vr, el.str)
		if !longLength(el.vr) && len(b) > 0xFFFF {
			return fmt.Errorf("element (%04X,%04X): %d bytes exceed a 16-bit length", el.tag>>16, el.tag&0xFFFF, len(b))
		}
		e.header(el.tag, el.vr, uint32(len(b)))
		e.buf.Write(b)
	}
	return nil
}

// encodePart10 returns a DICOM Part 10 file: 128-byte preamble, "DICM",
// the File Meta Information in Explicit VR Little Endian (PS3.10 7.1) and
// the dataset in transfer syntax ts. The dataset must hold SOP Class UID
// (0008,0016) and SOP Instance UID (0008,0018).
func encodePart10(ds dataset, ts string) ([]byte, error) {
	sort.SliceStable(ds, func(i, j int) bool { return ds[i].tag < ds[j].tag })
	var class, inst string
	for _, el := range ds {
		switch el.tag {
		case 0x00080016:
			class = el.str
		case 0x00080018:
			inst = el.str
		}
	}
	if class == "" || inst == "" {
		return nil, fmt.Errorf("encode: SOP Class and Instance UIDs are required")
	}
	body := &encoder{explicit: ts != midsag.ImplicitVRLittleEndian, order: binary.LittleEndian}
	if ts == midsag.ExplicitVRBigEndian {
		body.order = binary.BigEndian
	}
	for _, el := range ds {
		if err := body.element(el); err != nil {
			return nil, fmt.Errorf("encode dataset: %w", err)
		}
	}

	// The header leaves room for the dataset, which is appended in place.
	out := bytes.NewBuffer(part10.Header(part10.Meta{SOPClassUID: class, SOPInstanceUID: inst, TransferSyntaxUID: ts,
		ImplementationClassUID: implementationClassUID, ImplementationVersionName: implementationVersion}, body.buf.Len()))
	if ts == midsag.DeflatedExplicitVRLittleEndian {
		// Raw deflate (RFC 1951, no zlib header) of the explicit VR little
		// endian dataset, PS3.5 A.5.
		zw, err := flate.NewWriter(out, flate.BestSpeed)
		if err != nil {
			return nil, fmt.Errorf("deflate: %w", err)
		}
		if _, err := zw.Write(body.buf.Bytes()); err != nil {
			return nil, fmt.Errorf("deflate: %w", err)
		}
		if err := zw.Close(); err != nil {
			return nil, fmt.Errorf("deflate: %w", err)
		}
		return out.Bytes(), nil
	}
	out.Write(body.buf.Bytes())
	return out.Bytes(), nil
}

// implementationClassUID identifies this writer in the File Meta
// Information (PS3.7 D.3.3.2).
var implementationClassUID = uidFrom(implementationClassSeed)
