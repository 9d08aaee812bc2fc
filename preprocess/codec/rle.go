package codec

import (
	"encoding/binary"
	"fmt"
)

// rleHeaderSize is the fixed RLE header: one uint32 segment count followed by
// fifteen uint32 segment offsets, all little-endian (PS3.5 G.5).
const rleHeaderSize = 64

// rleMaxSegments is the number of offsets the header can hold (PS3.5 G.5).
const rleMaxSegments = 15

// rleGeometry checks the image attributes shared by DecodeRLE and EncodeRLE
// and returns the bytes per sample and the pixel count.
func rleGeometry(rows, cols, samplesPerPixel, bitsAllocated int) (bytesPerSample, pixels int, err error) {
	if rows <= 0 || cols <= 0 {
		return 0, 0, fmt.Errorf("codec: rle: invalid size %dx%d", cols, rows)
	}
	if samplesPerPixel <= 0 {
		return 0, 0, fmt.Errorf("codec: rle: invalid samples per pixel %d", samplesPerPixel)
	}
	switch bitsAllocated {
	case 8, 16, 32:
	default:
		return 0, 0, fmt.Errorf("codec: rle: unsupported bits allocated %d", bitsAllocated)
	}
	bytesPerSample = bitsAllocated / 8
	// PS3.5 G.2: one segment per byte of each sample, at most 15 in a frame.
	if samplesPerPixel*bytesPerSample > rleMaxSegments {
		return 0, 0, fmt.Errorf("codec: rle: %d samples of %d bytes need more than %d segments",
			samplesPerPixel, bytesPerSample, rleMaxSegments)
	}
	if rows > MaxSamples/cols || rows*cols > MaxSamples/(samplesPerPixel*bytesPerSample) {
		return 0, 0, fmt.Errorf("codec: rle: %dx%dx%d samples of %d bytes: %w",
			cols, rows, samplesPerPixel, bytesPerSample, ErrTooLarge)
	}
	return bytesPerSample, rows * cols, nil
}

// DecodeRLE decodes one RLE Lossless frame (PS3.5 Annex G) into native pixel
// bytes: little-endian samples, samples interleaved per pixel (planar
// configuration 0).
func DecodeRLE(frame []byte, rows, cols, samplesPerPixel, bitsAllocated int) ([]byte, error) {
	bps, pixels, err := rleGeometry(rows, cols, samplesPerPixel, bitsAllocated)
	if err != nil {
		return nil, err
	}
	if len(frame) < rleHeaderSize {
		return nil, fmt.Errorf("codec: rle: header of %d bytes: %w", len(frame), ErrTruncated)
	}
	nseg := int(binary.LittleEndian.Uint32(frame))
	want := samplesPerPixel * bps
	if nseg != want {
		return nil, fmt.Errorf("codec: rle: header names %d segments, %d samples of %d bytes need %d",
			nseg, samplesPerPixel, bps, want)
	}
	var offsets [rleMaxSegments + 1]int
	for i := range nseg {
		off := binary.LittleEndian.Uint32(frame[4+4*i:])
		if uint64(off) > uint64(len(frame)) {
			return nil, fmt.Errorf("codec: rle: segment %d offset %d beyond frame of %d bytes: %w",
				i, off, len(frame), ErrTruncated)
		}
		offsets[i] = int(off)
	}
	offsets[nseg] = len(frame)
	// PS3.5 G.5: the first segment follows the header directly.
	if offsets[0] != rleHeaderSize {
		return nil, fmt.Errorf("codec: rle: first segment offset %d, want %d", offsets[0], rleHeaderSize)
	}
	for i := range nseg {
		if offsets[i+1] < offsets[i] {
			return nil, fmt.Errorf("codec: rle: segment %d offsets decrease (%d then %d)", i, offsets[i], offsets[i+1])
		}
	}

	stride := samplesPerPixel * bps
	// PS3.5 G.3.1: a two-byte replicate run yields at most 128 bytes, so the
	// segments cannot expand beyond 64 times their length; checking this
	// first keeps a small hostile frame from forcing a large allocation.
	if pixels*stride > 64*(len(frame)-rleHeaderSize) {
		return nil, fmt.Errorf("codec: rle: %d bytes cannot hold %d decoded bytes: %w",
			len(frame), pixels*stride, ErrTruncated)
	}
	out := make([]byte, pixels*stride)
	for seg := range nseg {
		// PS3.5 G.2: segments run most significant byte first within each
		// sample; native little-endian output puts that byte last.
		sample, msbIndex := seg/bps, seg%bps
		pos := sample*bps + (bps - 1 - msbIndex)
		if err := unpackBits(frame[offsets[seg]:offsets[seg+1]], out, pos, stride, pixels); err != nil {
			return nil, fmt.Errorf("codec: rle: segment %d: %w", seg, err)
		}
	}
	return out, nil
}

// unpackBits expands one PackBits segment (PS3.5 G.3.2) into n bytes written
// to out[start], out[start+stride], ... Bytes after the n-th are ignored:
// they are the even-length padding of PS3.5 G.5 or, from some writers, a run
// that crosses the end of the segment.
func unpackBits(seg, out []byte, start, stride, n int) error {
	pos := start
	got := 0
	i := 0
	for got < n {
		if i >= len(seg) {
			return fmt.Errorf("decoded %d of %d bytes: %w", got, n, ErrTruncated)
		}
		h := int(int8(seg[i]))
		i++
		switch {
		case h >= 0:
			// Literal run: copy the next h+1 bytes.
			cnt := min(h+1, n-got)
			if i+cnt > len(seg) {
				return fmt.Errorf("literal run of %d at byte %d: %w", h+1, i-1, ErrTruncated)
			}
			for _, b := range seg[i : i+cnt] {
				out[pos] = b
				pos += stride
			}
			i += h + 1
			got += cnt
		case h != -128:
			// Replicate run: the next byte, 1-h times. -128 is a no-op.
			if i >= len(seg) {
				return fmt.Errorf("replicate run at byte %d: %w", i-1, ErrTruncated)
			}
			b := seg[i]
			i++
			cnt := min(1-h, n-got)
			for range cnt {
				out[pos] = b
				pos += stride
			}
			got += cnt
		}
	}
	return nil
}

// EncodeRLE encodes native little-endian interleaved pixel bytes as one RLE
// Lossless frame (PS3.5 Annex G, PackBits per G.3.1).
func EncodeRLE(native []byte, rows, cols, samplesPerPixel, bitsAllocated int) ([]byte, error) {
	bps, pixels, err := rleGeometry(rows, cols, samplesPerPixel, bitsAllocated)
	if err != nil {
		return nil, err
	}
	stride := samplesPerPixel * bps
	if len(native) != pixels*stride {
		return nil, fmt.Errorf("codec: rle: %d native bytes, %dx%dx%d samples of %d bytes need %d",
			len(native), cols, rows, samplesPerPixel, bps, pixels*stride)
	}
	nseg := stride
	out := make([]byte, rleHeaderSize, rleHeaderSize+len(native)+len(native)/64+nseg*rows+nseg)
	binary.LittleEndian.PutUint32(out, uint32(nseg))
	row := make([]byte, cols)
	for seg := range nseg {
		// MaxSamples keeps the frame far below 4 GiB, so the offset fits.
		binary.LittleEndian.PutUint32(out[4+4*seg:], uint32(len(out)))
		sample, msbIndex := seg/bps, seg%bps
		pos := sample*bps + (bps - 1 - msbIndex)
		// PS3.5 G.3.1: each row is packed separately; runs never cross rows.
		for r := range rows {
			for c := range row {
				row[c] = native[(r*cols+c)*stride+pos]
			}
			out = packBits(out, row)
		}
		// PS3.5 G.5: every segment has even length, padded with a zero byte.
		if len(out)%2 != 0 {
			out = append(out, 0)
		}
	}
	return out, nil
}

// packBits appends the PackBits code of src to dst (PS3.5 G.3.1): runs of
// three or more equal bytes become replicate runs, the rest literal runs, each
// at most 128 bytes.
func packBits(dst, src []byte) []byte {
	i := 0
	for i < len(src) {
		run := 1
		for i+run < len(src) && run < 128 && src[i+run] == src[i] {
			run++
		}
		if run >= 3 {
			dst = append(dst, byte(int8(1-run)), src[i])
			i += run
			continue
		}
		// Literal run: extend until a run of three equal bytes starts.
		j := i
		for j < len(src) && j-i < 128 {
			if j+2 < len(src) && src[j] == src[j+1] && src[j] == src[j+2] {
				break
			}
			j++
		}
		dst = append(dst, byte(j-i-1))
		dst = append(dst, src[i:j]...)
		i = j
	}
	return dst
}
