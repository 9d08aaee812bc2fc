package codec

import (
	"encoding/binary"
	"errors"
	"fmt"
)

// Lossless is a decoded JPEG lossless image.
type Lossless struct {
	// Width and Height are the frame's X and Y (ITU-T T.81 B.2.2).
	Width, Height int
	// Components is the frame's Nf, the number of samples per pixel.
	Components int
	// Precision is the frame's P, the bits per sample (2..16).
	Precision int
	// Samples holds Width*Height*Components samples, interleaved per pixel,
	// row-major, already shifted left by the scan's point transform.
	Samples []uint16
}

// JPEG marker codes (ITU-T T.81 Table B.1).
const (
	markerSOF3 = 0xC3
	markerDHT  = 0xC4
	markerJPG  = 0xC8
	markerDAC  = 0xCC
	markerRST0 = 0xD0
	markerRST7 = 0xD7
	markerSOI  = 0xD8
	markerEOI  = 0xD9
	markerSOS  = 0xDA
	markerDRI  = 0xDD
	markerTEM  = 0x01
)

// errBadHuffman reports entropy-coded data that matches no Huffman code.
var errBadHuffman = errors.New("codec: jpeg: invalid Huffman code")

// lookBits is the width of the fast Huffman lookup table.
const lookBits = 9

// huffTable is one DC Huffman table (ITU-T T.81 B.2.4.2) prepared for the
// decoding procedure of T.81 F.2.2.3, with a lookup table for short codes.
type huffTable struct {
	defined bool
	// lookup maps the next lookBits bits to length<<8|value; 0 means the
	// code is longer than lookBits.
	lookup  [1 << lookBits]uint16
	maxcode [17]int32
	mincode [17]int32
	valptr  [17]int32
	vals    []byte
}

// build fills t from the BITS counts and HUFFVAL values (T.81 C.2, F.2.2.3).
func (t *huffTable) build(counts [16]int, vals []byte) error {
	*t = huffTable{defined: true, vals: vals}
	code, k := int32(0), int32(0)
	for l := 1; l <= 16; l++ {
		n := int32(counts[l-1])
		t.valptr[l] = k
		t.mincode[l] = code
		t.maxcode[l] = -1
		if n > 0 {
			if code+n > 1<<l {
				return fmt.Errorf("codec: jpeg: Huffman table overflows at length %d", l)
			}
			for c := code; c < code+n; c++ {
				if l <= lookBits {
					shift := lookBits - l
					entry := uint16(l)<<8 | uint16(vals[k+c-code])
					for i := c << shift; i < (c+1)<<shift; i++ {
						t.lookup[i] = entry
					}
				}
			}
			t.maxcode[l] = code + n - 1
		}
		code += n
		k += n
		code <<= 1
	}
	return nil
}

// bitReader reads entropy-coded data (T.81 F.2.2.5), removing stuffed zero
// bytes (T.81 B.1.1.5) and stopping at the first marker. Past that point it
// supplies zero bits so lookahead works, counting them in fake so a decoder
// that actually consumes them can report truncation.
type bitReader struct {
	data   []byte
	pos    int
	acc    uint64
	n      uint
	fake   uint
	marker bool
}

// fill tops the accumulator up to at least 57 bits.
func (b *bitReader) fill() {
	for b.n <= 56 {
		if !b.marker && b.pos < len(b.data) {
			c := b.data[b.pos]
			if c != 0xFF {
				b.pos++
				b.acc = b.acc<<8 | uint64(c)
				b.n += 8
				continue
			}
			if b.pos+1 < len(b.data) && b.data[b.pos+1] == 0x00 {
				b.pos += 2
				b.acc = b.acc<<8 | 0xFF
				b.n += 8
				continue
			}
		}
		b.marker = true
		b.acc <<= 8
		b.n += 8
		b.fake += 8
	}
}

// peek returns the next k bits (k <= 16) without consuming them.
func (b *bitReader) peek(k uint) uint32 {
	if b.n < k {
		b.fill()
	}
	return uint32(b.acc>>(b.n-k)) & (1<<k - 1)
}

// skip consumes k bits, which the caller has peeked.
func (b *bitReader) skip(k uint) { b.n -= k }

// overrun reports whether bits past the end of the entropy data were used.
func (b *bitReader) overrun() bool { return b.fake > b.n }

// decodeHuff reads one Huffman-coded value with table t (T.81 F.2.2.3).
func (b *bitReader) decodeHuff(t *huffTable) (int, error) {
	if b.n < 16 {
		b.fill()
	}
	if e := t.lookup[b.peek(lookBits)]; e != 0 {
		b.skip(uint(e >> 8))
		return int(e & 0xFF), nil
	}
	bits := int32(b.peek(16))
	for l := lookBits + 1; l <= 16; l++ {
		code := bits >> (16 - l)
		if code <= t.maxcode[l] {
			b.skip(uint(l))
			return int(t.vals[t.valptr[l]+code-t.mincode[l]]), nil
		}
	}
	return 0, errBadHuffman
}

// receiveExtend reads the difference for category s (T.81 F.2.2.1, with the
// lossless category 16 of T.81 H.1.2.2, which carries no extra bits and
// always means 32768).
func (b *bitReader) receiveExtend(s int) int {
	switch s {
	case 0:
		return 0
	case 16:
		return 32768
	}
	if b.n < uint(s) {
		b.fill()
	}
	v := int(b.peek(uint(s)))
	b.skip(uint(s))
	if v < 1<<(s-1) {
		v += -1<<s + 1
	}
	return v
}

// frameComponent is one component of the frame header (T.81 B.2.2).
type frameComponent struct {
	id      byte
	h, v    byte
	decoded bool
}

// losslessDecoder holds the state of one DecodeJPEGLossless call.
type losslessDecoder struct {
	data     []byte
	pos      int
	haveSOF  bool
	img      Lossless
	comps    []frameComponent
	tables   [4]huffTable
	restarts int
}

// DecodeJPEGLossless decodes a JPEG lossless (process 14, SOF3) codestream:
// any predictor 1..7, Huffman, restart intervals (DRI/RSTn), point transform,
// precision 2..16 (handle the SSSS=16 difference category per T.81 H.1.2.2),
// 1 or 3 components.
func DecodeJPEGLossless(data []byte) (*Lossless, error) {
	d := &losslessDecoder{data: data}
	if len(data) < 2 || data[0] != 0xFF || data[1] != markerSOI {
		return nil, errors.New("codec: jpeg: missing SOI marker")
	}
	d.pos = 2
	for {
		m, err := d.nextMarker()
		if err != nil {
			return nil, err
		}
		switch {
		case m == markerEOI:
			return d.finish()
		case m == markerTEM:
			// T.81 B.1.1.3: TEM stands alone without a length.
		case m >= markerRST0 && m <= markerRST7:
			return nil, fmt.Errorf("codec: jpeg: RST%d outside entropy-coded data", m-markerRST0)
		case m == markerSOI:
			return nil, errors.New("codec: jpeg: unexpected second SOI marker")
		default:
			seg, err := d.segment(m)
			if err != nil {
				return nil, err
			}
			if err := d.handle(m, seg); err != nil {
				return nil, err
			}
		}
	}
}

// nextMarker skips to the next marker, past fill bytes (T.81 B.1.1.2), and
// returns its code. Bytes that are not part of a marker are skipped so that
// trailing padding after entropy-coded data is tolerated.
func (d *losslessDecoder) nextMarker() (byte, error) {
	for d.pos+1 < len(d.data) {
		if d.data[d.pos] != 0xFF {
			d.pos++
			continue
		}
		m := d.data[d.pos+1]
		if m == 0xFF {
			d.pos++
			continue
		}
		if m == 0x00 {
			d.pos += 2
			continue
		}
		d.pos += 2
		return m, nil
	}
	return 0, fmt.Errorf("codec: jpeg: no EOI marker: %w", ErrTruncated)
}

// segment returns the body of the marker segment at d.pos (T.81 B.1.1.4).
func (d *losslessDecoder) segment(m byte) ([]byte, error) {
	if d.pos+2 > len(d.data) {
		return nil, fmt.Errorf("codec: jpeg: marker 0x%02X length: %w", m, ErrTruncated)
	}
	n := int(binary.BigEndian.Uint16(d.data[d.pos:]))
	if n < 2 {
		return nil, fmt.Errorf("codec: jpeg: marker 0x%02X has invalid length %d", m, n)
	}
	if d.pos+n > len(d.data) {
		return nil, fmt.Errorf("codec: jpeg: marker 0x%02X segment of %d bytes: %w", m, n, ErrTruncated)
	}
	seg := d.data[d.pos+2 : d.pos+n]
	d.pos += n
	return seg, nil
}

// handle acts on one marker segment.
func (d *losslessDecoder) handle(m byte, seg []byte) error {
	switch {
	case m == markerSOF3:
		return d.parseSOF(seg)
	case m >= 0xC0 && m <= 0xCF && m != markerDHT && m != markerJPG && m != markerDAC:
		return fmt.Errorf("codec: jpeg: SOF%d is not lossless Huffman (process 14, SOF3)", m-0xC0)
	case m == markerDAC:
		return errors.New("codec: jpeg: arithmetic coding is not supported")
	case m == markerDHT:
		return d.parseDHT(seg)
	case m == markerDRI:
		// T.81 B.2.4.4: Lr is 4, so the body is the 16-bit Ri.
		if len(seg) != 2 {
			return fmt.Errorf("codec: jpeg: DRI body of %d bytes, want 2", len(seg))
		}
		d.restarts = int(binary.BigEndian.Uint16(seg))
		return nil
	case m == markerSOS:
		return d.parseSOSAndDecode(seg)
	}
	// APPn, COM, DQT, DNL and other segments carry nothing lossless decoding
	// needs (T.81 B.2.4).
	return nil
}

// parseSOF reads the frame header (T.81 B.2.2) and allocates the image.
func (d *losslessDecoder) parseSOF(seg []byte) error {
	if d.haveSOF {
		return errors.New("codec: jpeg: more than one frame header")
	}
	if len(seg) < 6 {
		return fmt.Errorf("codec: jpeg: SOF3 of %d bytes: %w", len(seg), ErrTruncated)
	}
	p := int(seg[0])
	y := int(binary.BigEndian.Uint16(seg[1:]))
	x := int(binary.BigEndian.Uint16(seg[3:]))
	nf := int(seg[5])
	if p < 2 || p > 16 {
		return fmt.Errorf("codec: jpeg: precision %d outside 2..16 (T.81 B.2.2)", p)
	}
	if x == 0 {
		return errors.New("codec: jpeg: frame width 0")
	}
	if y == 0 {
		return errors.New("codec: jpeg: frame height defined by DNL is not supported")
	}
	if nf < 1 || nf > 4 {
		return fmt.Errorf("codec: jpeg: %d components, want 1..4", nf)
	}
	if len(seg) != 6+3*nf {
		return fmt.Errorf("codec: jpeg: SOF3 of %d bytes for %d components, want %d", len(seg), nf, 6+3*nf)
	}
	total := x * y * nf
	if total > MaxSamples {
		return fmt.Errorf("codec: jpeg: %dx%dx%d: %w", x, y, nf, ErrTooLarge)
	}
	// Every sample costs at least one bit of Huffman code (T.81 C.2), so a
	// codestream shorter than total/8 bytes cannot be complete.
	if total > 8*len(d.data) {
		return fmt.Errorf("codec: jpeg: %d bytes cannot hold %d samples: %w", len(d.data), total, ErrTruncated)
	}
	d.comps = make([]frameComponent, nf)
	for i := range d.comps {
		c := seg[6+3*i:]
		d.comps[i] = frameComponent{id: c[0], h: c[1] >> 4, v: c[1] & 0x0F}
		for j := range i {
			if d.comps[j].id == c[0] {
				return fmt.Errorf("codec: jpeg: component id %d repeated", c[0])
			}
		}
		// Subsampled components would need their own sample grid; DICOM
		// lossless images do not use them.
		if d.comps[i].h != d.comps[0].h || d.comps[i].v != d.comps[0].v || d.comps[i].h == 0 || d.comps[i].v == 0 {
			return fmt.Errorf("codec: jpeg: component %d sampling %dx%d is not supported", c[0], d.comps[i].h, d.comps[i].v)
		}
	}
	d.haveSOF = true
	d.img = Lossless{Width: x, Height: y, Components: nf, Precision: p, Samples: make([]uint16, total)}
	return nil
}

// parseDHT reads one or more Huffman tables (T.81 B.2.4.2).
func (d *losslessDecoder) parseDHT(seg []byte) error {
	for len(seg) > 0 {
		if len(seg) < 17 {
			return fmt.Errorf("codec: jpeg: DHT of %d bytes: %w", len(seg), ErrTruncated)
		}
		tc, th := seg[0]>>4, seg[0]&0x0F
		if tc > 1 || th > 3 {
			return fmt.Errorf("codec: jpeg: DHT class %d destination %d out of range", tc, th)
		}
		var counts [16]int
		total := 0
		for i := range counts {
			counts[i] = int(seg[1+i])
			total += counts[i]
		}
		if total > 256 || len(seg) < 17+total {
			return fmt.Errorf("codec: jpeg: DHT with %d values in %d bytes: %w", total, len(seg), ErrTruncated)
		}
		vals := seg[17 : 17+total]
		seg = seg[17+total:]
		// T.81 H.1.1: lossless scans use only DC-class tables.
		if tc != 0 {
			continue
		}
		if err := d.tables[th].build(counts, vals); err != nil {
			return err
		}
	}
	return nil
}

// scanComponent is one component of a scan header with its frame index.
type scanComponent struct {
	index int
	table *huffTable
}

// parseSOSAndDecode reads a scan header (T.81 B.2.3) and decodes the scan
// that follows it.
func (d *losslessDecoder) parseSOSAndDecode(seg []byte) error {
	if !d.haveSOF {
		return errors.New("codec: jpeg: SOS before SOF3")
	}
	if len(seg) < 1 {
		return fmt.Errorf("codec: jpeg: empty SOS: %w", ErrTruncated)
	}
	ns := int(seg[0])
	if ns < 1 || ns > 4 || len(seg) != 4+2*ns {
		return fmt.Errorf("codec: jpeg: SOS of %d bytes for %d components", len(seg), ns)
	}
	sc := make([]scanComponent, ns)
	for i := range sc {
		id, td := seg[1+2*i], seg[2+2*i]>>4
		idx := -1
		for j, c := range d.comps {
			if c.id == id {
				idx = j
			}
		}
		if idx < 0 {
			return fmt.Errorf("codec: jpeg: scan names unknown component %d", id)
		}
		if d.comps[idx].decoded {
			return fmt.Errorf("codec: jpeg: component %d appears in two scans", id)
		}
		d.comps[idx].decoded = true
		if td > 3 || !d.tables[td].defined {
			return fmt.Errorf("codec: jpeg: component %d uses undefined Huffman table %d", id, td)
		}
		sc[i] = scanComponent{index: idx, table: &d.tables[td]}
	}
	// T.81 H.2.2: Ss is the predictor selection value, Al the point transform.
	pred := int(seg[1+2*ns])
	pt := int(seg[3+2*ns] & 0x0F)
	if pred < 1 || pred > 7 {
		return fmt.Errorf("codec: jpeg: predictor %d outside 1..7", pred)
	}
	if pt >= d.img.Precision {
		return fmt.Errorf("codec: jpeg: point transform %d not below precision %d", pt, d.img.Precision)
	}
	if err := d.decodeScan(sc, pred, pt); err != nil {
		return err
	}
	return nil
}

// decodeScan decodes the entropy-coded data of one scan starting at d.pos
// and leaves d.pos at the marker that ends it.
func (d *losslessDecoder) decodeScan(sc []scanComponent, pred, pt int) error {
	w, h, nf := d.img.Width, d.img.Height, d.img.Components
	s := d.img.Samples
	br := &bitReader{data: d.data, pos: d.pos}
	// T.81 H.1.2.1: the first sample of the scan, and after each restart,
	// is predicted from 2^(P-Pt-1).
	initial := 1 << (d.img.Precision - pt - 1)
	rowStride := w * nf
	startY, startX := 0, 0
	mcu, nextRST := 0, 0
	for y := range h {
		for x := range w {
			if d.restarts > 0 && mcu > 0 && mcu%d.restarts == 0 {
				if err := d.restart(br, nextRST); err != nil {
					return fmt.Errorf("codec: jpeg: row %d column %d: %w", y, x, err)
				}
				nextRST = (nextRST + 1) & 7
				startY, startX = y, x
			}
			mcu++
			base := y*rowStride + x*nf
			for _, c := range sc {
				i := base + c.index
				var px int
				switch {
				case y == startY && x == startX:
					px = initial
				case y == startY:
					// T.81 H.1.2.1: the first line uses predictor 1 (Ra).
					px = int(s[i-nf])
				case x == 0:
					// T.81 H.1.2.1: the first column uses predictor 2 (Rb).
					px = int(s[i-rowStride])
				default:
					px = predict(pred, int(s[i-nf]), int(s[i-rowStride]), int(s[i-rowStride-nf]))
				}
				ssss, err := br.decodeHuff(c.table)
				if err != nil {
					return fmt.Errorf("codec: jpeg: row %d column %d: %w", y, x, err)
				}
				if ssss > 16 {
					return fmt.Errorf("codec: jpeg: row %d column %d: difference category %d above 16", y, x, ssss)
				}
				// T.81 H.2.1: differences are taken modulo 2^16.
				s[i] = uint16(px + br.receiveExtend(ssss))
			}
			if br.overrun() {
				return fmt.Errorf("codec: jpeg: entropy data ends at row %d column %d: %w", y, x, ErrTruncated)
			}
		}
	}
	d.pos = br.pos
	if pt > 0 {
		for i := 0; i < len(s); i += nf {
			for _, c := range sc {
				s[i+c.index] <<= pt
			}
		}
	}
	return nil
}

// restart discards the bits left before a restart marker and consumes the
// marker RSTn with n = want (T.81 E.2.4, F.2.2.5).
func (d *losslessDecoder) restart(br *bitReader, want int) error {
	p := br.pos
	if p >= len(d.data) || d.data[p] != 0xFF {
		return fmt.Errorf("missing RST%d marker: %w", want, ErrTruncated)
	}
	for p < len(d.data) && d.data[p] == 0xFF {
		p++
	}
	if p >= len(d.data) {
		return fmt.Errorf("missing RST%d marker: %w", want, ErrTruncated)
	}
	if d.data[p] != byte(markerRST0+want) {
		return fmt.Errorf("found marker 0x%02X where RST%d belongs", d.data[p], want)
	}
	*br = bitReader{data: d.data, pos: p + 1}
	return nil
}

// predict applies predictor selection value pred (T.81 Table H.1) to the
// reconstructed neighbours left (Ra), above (Rb) and above-left (Rc).
func predict(pred, ra, rb, rc int) int {
	switch pred {
	case 1:
		return ra
	case 2:
		return rb
	case 3:
		return rc
	case 4:
		return ra + rb - rc
	case 5:
		return ra + (rb-rc)>>1
	case 6:
		return rb + (ra-rc)>>1
	default:
		return (ra + rb) >> 1
	}
}

// finish checks that every component was decoded once EOI is reached.
func (d *losslessDecoder) finish() (*Lossless, error) {
	if !d.haveSOF {
		return nil, errors.New("codec: jpeg: EOI before SOF3")
	}
	for _, c := range d.comps {
		if !c.decoded {
			return nil, fmt.Errorf("codec: jpeg: component %d has no scan: %w", c.id, ErrTruncated)
		}
	}
	img := d.img
	return &img, nil
}
