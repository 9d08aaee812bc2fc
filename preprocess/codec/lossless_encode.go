package codec

import (
	"encoding/binary"
	"fmt"
	"math/bits"
	"sort"
)

// EncodeJPEGLossless encodes a single-component image with predictor 1
// (first-order, selection value 1) as a JPEG lossless codestream (SOI, SOF3,
// DHT, SOS, EOI). The Huffman table is built from the image's own difference
// statistics (ITU-T T.81 K.2) and the point transform is 0.
func EncodeJPEGLossless(samples []uint16, width, height, precision int) ([]byte, error) {
	if width <= 0 || height <= 0 || width > 0xFFFF || height > 0xFFFF {
		return nil, fmt.Errorf("codec: jpeg encode: size %dx%d outside 1..65535 (T.81 B.2.2)", width, height)
	}
	if precision < 2 || precision > 16 {
		return nil, fmt.Errorf("codec: jpeg encode: precision %d outside 2..16 (T.81 B.2.2)", precision)
	}
	if width*height > MaxSamples {
		return nil, fmt.Errorf("codec: jpeg encode: %dx%d: %w", width, height, ErrTooLarge)
	}
	if len(samples) != width*height {
		return nil, fmt.Errorf("codec: jpeg encode: %d samples for %dx%d", len(samples), width, height)
	}
	limit := uint32(1) << precision
	// Differences are computed once, then Huffman-coded with a table fitted
	// to their category frequencies.
	diffs := make([]uint16, len(samples))
	var freq [17]int
	for i, v := range samples {
		if uint32(v) >= limit {
			return nil, fmt.Errorf("codec: jpeg encode: sample %d value %d exceeds precision %d", i, v, precision)
		}
		x := i % width
		var px int
		switch {
		case i == 0:
			// T.81 H.1.2.1: the first sample is predicted from 2^(P-1).
			px = 1 << (precision - 1)
		case x == 0:
			// T.81 H.1.2.1: the first column uses Rb.
			px = int(samples[i-width])
		default:
			// Selection value 1 (Ra), which is also the first-row rule.
			px = int(samples[i-1])
		}
		// T.81 H.2.1: the difference is taken modulo 2^16.
		d := uint16(int(v) - px)
		diffs[i] = d
		freq[category(d)]++
	}
	counts, vals := buildHuffman(freq)
	codes, lens := huffmanCodes(counts, vals)

	out := make([]byte, 0, 2+13+2+3+16+17+10+len(samples)+2)
	out = append(out, 0xFF, markerSOI)
	// Frame header (T.81 B.2.2): Lf, P, Y, X, Nf=1, C1=1, H1V1=1x1, Tq1=0.
	out = append(out, 0xFF, markerSOF3, 0, 11, byte(precision))
	out = binary.BigEndian.AppendUint16(out, uint16(height))
	out = binary.BigEndian.AppendUint16(out, uint16(width))
	out = append(out, 1, 1, 0x11, 0)
	// Huffman table (T.81 B.2.4.2): class 0 (DC/lossless), destination 0.
	out = append(out, 0xFF, markerDHT)
	out = binary.BigEndian.AppendUint16(out, uint16(2+1+16+len(vals)))
	out = append(out, 0x00)
	for _, c := range counts {
		out = append(out, byte(c))
	}
	out = append(out, vals...)
	// Scan header (T.81 B.2.3): Ns=1, Cs1=1, Td1/Ta1=0, Ss=1 (predictor),
	// Se=0, Ah/Al=0 (no point transform).
	out = append(out, 0xFF, markerSOS, 0, 8, 1, 1, 0x00, 1, 0, 0)

	bw := bitWriter{out: out}
	for _, d := range diffs {
		s := category(d)
		bw.write(uint32(codes[s]), uint(lens[s]))
		if s > 0 && s < 16 {
			// T.81 F.1.2.1.1: negative differences are sent as d-1.
			v := uint32(int16(d))
			if int16(d) < 0 {
				v--
			}
			bw.write(v&(1<<s-1), uint(s))
		}
	}
	out = bw.flush()
	return append(out, 0xFF, markerEOI), nil
}

// category returns SSSS for a difference held modulo 2^16 (T.81 Table H.2);
// 0x8000 is the category 16 value 32768.
func category(d uint16) int {
	if d == 0x8000 {
		return 16
	}
	v := int(int16(d))
	if v < 0 {
		v = -v
	}
	return bits.Len(uint(v))
}

// bitWriter packs Huffman codes most significant bit first, stuffing a zero
// byte after every 0xFF (T.81 B.1.1.5).
type bitWriter struct {
	out []byte
	acc uint64
	n   uint
}

// write appends the low k bits of v.
func (w *bitWriter) write(v uint32, k uint) {
	w.acc = w.acc<<k | uint64(v)
	w.n += k
	for w.n >= 8 {
		b := byte(w.acc >> (w.n - 8))
		w.out = append(w.out, b)
		if b == 0xFF {
			w.out = append(w.out, 0x00)
		}
		w.n -= 8
	}
}

// flush pads the last byte with 1 bits (T.81 F.1.2.3) and returns the output.
func (w *bitWriter) flush() []byte {
	if w.n > 0 {
		w.write(1<<(8-w.n)-1, 8-w.n)
	}
	return w.out
}

// buildHuffman derives BITS and HUFFVAL for the categories 0..16 from their
// frequencies with the procedure of T.81 K.2 (Figures K.1 to K.4), which
// limits codes to 16 bits and never assigns the all-ones code.
func buildHuffman(freq [17]int) (counts [16]int, vals []byte) {
	const reserved = 17
	var f [18]int
	copy(f[:], freq[:])
	f[reserved] = 1
	var codesize [18]int
	var others [18]int
	for i := range others {
		others[i] = -1
	}
	for {
		// Figure K.1: V1 is the least frequency, V2 the next; ties go to
		// the larger symbol.
		v1, v2 := -1, -1
		for i := range f {
			if f[i] > 0 && (v1 < 0 || f[i] <= f[v1]) {
				v1 = i
			}
		}
		for i := range f {
			if f[i] > 0 && i != v1 && (v2 < 0 || f[i] <= f[v2]) {
				v2 = i
			}
		}
		if v2 < 0 {
			break
		}
		f[v1] += f[v2]
		f[v2] = 0
		codesize[v1]++
		for others[v1] >= 0 {
			v1 = others[v1]
			codesize[v1]++
		}
		others[v1] = v2
		codesize[v2]++
		for others[v2] >= 0 {
			v2 = others[v2]
			codesize[v2]++
		}
	}
	// Figure K.2: count codes per size.
	var bitsCount [40]int
	for _, cs := range codesize {
		if cs > 0 {
			bitsCount[cs]++
		}
	}
	// Figure K.3: move codes longer than 16 bits up the tree.
	for i := len(bitsCount) - 1; i > 16; i-- {
		for bitsCount[i] > 0 {
			j := i - 2
			for bitsCount[j] == 0 {
				j--
			}
			bitsCount[i] -= 2
			bitsCount[i-1]++
			bitsCount[j+1] += 2
			bitsCount[j]--
		}
	}
	// Remove the reserved code point from the longest size in use.
	for i := 16; i > 0; i-- {
		if bitsCount[i] > 0 {
			bitsCount[i]--
			break
		}
	}
	copy(counts[:], bitsCount[1:17])
	// Figure K.4: symbols in order of code size, then symbol value.
	syms := make([]int, 0, 17)
	for s := range 17 {
		if freq[s] > 0 {
			syms = append(syms, s)
		}
	}
	sort.SliceStable(syms, func(a, b int) bool { return codesize[syms[a]] < codesize[syms[b]] })
	vals = make([]byte, len(syms))
	for i, s := range syms {
		vals[i] = byte(s)
	}
	return counts, vals
}

// huffmanCodes generates the code and length of each symbol from BITS and
// HUFFVAL (T.81 C.2, Figures C.1 to C.3).
func huffmanCodes(counts [16]int, vals []byte) (codes [17]uint16, lens [17]uint8) {
	code, k := 0, 0
	for l := 1; l <= 16; l++ {
		for range counts[l-1] {
			codes[vals[k]] = uint16(code)
			lens[vals[k]] = uint8(l)
			code++
			k++
		}
		code <<= 1
	}
	return codes, lens
}
