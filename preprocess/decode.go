package preprocess

import (
	"bytes"
	"encoding/binary"
	"fmt"
	"image/color"
	"image/jpeg"

	"github.com/midsag/midsag"
	"github.com/midsag/midsag/preprocess/codec"
)

// Decode returns frame inst.Frame of inst in modality units: the stored
// value masked to Bits Stored, sign-extended for Pixel Representation 1,
// Rescale Slope and Intercept applied (PS3.3 C.11.1.1.2), and MONOCHROME1
// inverted so that higher always means brighter. Colour images are reduced
// to their mean channel.
func Decode(inst *midsag.Instance) (*midsag.Image, error) {
	ts := inst.TransferSyntaxUID
	if _, ok := SupportedSyntaxes[ts]; !ok {
		return nil, midsag.Rejectf(midsag.ReasonUnsupportedSyntax,
			"transfer syntax %s is not decoded by midsag; convert the files to Explicit VR Little Endian with a general DICOM toolkit first", ts)
	}
	rows, cols, spp := inst.Rows, inst.Columns, inst.SamplesPerPixel
	if rows <= 0 || cols <= 0 {
		return nil, midsag.Rejectf(midsag.ReasonBadPixelData, "image has no rows or columns")
	}
	if spp != 1 && spp != 3 {
		return nil, midsag.Rejectf(midsag.ReasonBadPixelData, "%d samples per pixel; only 1 or 3 are read", spp)
	}
	switch inst.BitsAllocated {
	case 8, 16:
	default:
		return nil, midsag.Rejectf(midsag.ReasonBadPixelData, "bits allocated %d; only 8 and 16 are read", inst.BitsAllocated)
	}
	if inst.BitsStored < 1 || inst.BitsStored > inst.BitsAllocated || inst.HighBit >= inst.BitsAllocated || inst.HighBit < inst.BitsStored-1 {
		return nil, midsag.Rejectf(midsag.ReasonBadPixelData, "bits stored %d and high bit %d do not fit %d bits allocated",
			inst.BitsStored, inst.HighBit, inst.BitsAllocated)
	}
	n := rows * cols * spp
	frame, err := frameBytes(inst)
	if err != nil {
		return nil, err
	}
	var raw []int32
	switch ts {
	case midsag.ImplicitVRLittleEndian, midsag.ExplicitVRLittleEndian, midsag.DeflatedExplicitVRLittleEndian:
		raw, err = native(frame, n, inst.BitsAllocated, binary.LittleEndian)
	case midsag.ExplicitVRBigEndian:
		raw, err = native(frame, n, inst.BitsAllocated, binary.BigEndian)
	case midsag.RLELossless:
		var b []byte
		b, err = codec.DecodeRLE(frame, rows, cols, spp, inst.BitsAllocated)
		if err == nil {
			// RLE Lossless always decodes to planar configuration 0
			// with samples little-endian (PS3.5 G.2).
			raw, err = native(b, n, inst.BitsAllocated, binary.LittleEndian)
			inst = withPlanar(inst, 0)
		}
	case midsag.JPEGLossless, midsag.JPEGLosslessSV1:
		raw, err = jpegLossless(frame, rows, cols, spp)
		inst = withPlanar(inst, 0)
	case midsag.JPEGBaseline8Bit:
		raw, err = jpegBaseline(frame, rows, cols, spp)
		inst = withPlanar(inst, 0)
	}
	if err != nil {
		return nil, midsag.Reject(midsag.ReasonBadPixelData, "cannot decode pixel data", err)
	}
	return toImage(inst, raw), nil
}

func withPlanar(inst *midsag.Instance, pc int) *midsag.Instance {
	c := *inst
	c.PlanarConfiguration = pc
	return &c
}

// frameBytes returns the stored bytes of frame inst.Frame: for native
// pixel data the frame's slice of the value, frames being stored one after
// another (PS3.5 8.1.1); for encapsulated pixel data the frame's fragments
// (PS3.5 A.4), found by the Extended or Basic Offset Table when it has one
// entry per frame, or one fragment per frame when there are as many
// fragments as frames. A single frame owns every fragment.
func frameBytes(inst *midsag.Instance) ([]byte, error) {
	frames := max(inst.NumberOfFrames, 1)
	if inst.Frame < 0 || inst.Frame >= frames {
		return nil, midsag.Rejectf(midsag.ReasonBadPixelData, "frame %d asked of an image with %d frames", inst.Frame+1, frames)
	}
	if len(inst.Fragments) == 0 {
		size := inst.Rows * inst.Columns * inst.SamplesPerPixel * (inst.BitsAllocated / 8)
		start, end := inst.Frame*size, (inst.Frame+1)*size
		if end > len(inst.PixelData) {
			return nil, midsag.Rejectf(midsag.ReasonTruncated, "pixel data has %d bytes; frame %d of %d needs bytes %d to %d",
				len(inst.PixelData), inst.Frame+1, frames, start, end)
		}
		return inst.PixelData[start:end], nil
	}
	if frames == 1 {
		if len(inst.Fragments) == 1 {
			return inst.Fragments[0], nil
		}
		return bytes.Join(inst.Fragments, nil), nil
	}
	if len(inst.FrameOffsets) == frames {
		// Item offsets: each fragment item is an 8-byte tag and length
		// followed by its value (PS3.5 A.4, 7.5).
		index := make(map[uint64]int, len(inst.Fragments)+1)
		var at uint64
		for k, f := range inst.Fragments {
			index[at] = k
			at += 8 + uint64(len(f))
		}
		index[at] = len(inst.Fragments)
		first, ok1 := index[inst.FrameOffsets[inst.Frame]]
		last := len(inst.Fragments)
		ok2 := true
		if inst.Frame+1 < frames {
			last, ok2 = index[inst.FrameOffsets[inst.Frame+1]]
		}
		if !ok1 || !ok2 || last <= first {
			return nil, midsag.Rejectf(midsag.ReasonBadPixelData, "the offset table entry of frame %d does not start a fragment", inst.Frame+1)
		}
		if last-first == 1 {
			return inst.Fragments[first], nil
		}
		return bytes.Join(inst.Fragments[first:last], nil), nil
	}
	if len(inst.Fragments) == frames {
		return inst.Fragments[inst.Frame], nil
	}
	return nil, midsag.Rejectf(midsag.ReasonBadPixelData,
		"%d fragments for %d frames and no offset table: the frame boundaries are unknown (PS3.5 A.4)", len(inst.Fragments), frames)
}

// native reads n stored values of bitsAllocated bits each. The values are
// unmasked; toImage applies Bits Stored and High Bit.
func native(b []byte, n, bitsAllocated int, bo binary.ByteOrder) ([]int32, error) {
	bytesPer := bitsAllocated / 8
	if len(b) < n*bytesPer {
		return nil, midsag.Rejectf(midsag.ReasonTruncated, "pixel data has %d bytes, %d needed", len(b), n*bytesPer)
	}
	out := make([]int32, n)
	if bytesPer == 1 {
		for i := range out {
			out[i] = int32(b[i])
		}
		return out, nil
	}
	for i := range out {
		out[i] = int32(bo.Uint16(b[2*i:]))
	}
	return out, nil
}

func jpegLossless(frame []byte, rows, cols, spp int) ([]int32, error) {
	img, err := codec.DecodeJPEGLossless(frame)
	if err != nil {
		return nil, err
	}
	if img.Width != cols || img.Height != rows || img.Components != spp {
		return nil, fmt.Errorf("JPEG frame is %dx%dx%d but the header says %dx%dx%d", img.Width, img.Height, img.Components, cols, rows, spp)
	}
	out := make([]int32, len(img.Samples))
	for i, v := range img.Samples {
		out[i] = int32(v)
	}
	return out, nil
}

// jpegBaseline decodes 8-bit JPEG (ITU-T T.81 process 1) with the
// standard library.
func jpegBaseline(frame []byte, rows, cols, spp int) ([]int32, error) {
	img, err := jpeg.Decode(bytes.NewReader(frame))
	if err != nil {
		return nil, err
	}
	b := img.Bounds()
	if b.Dx() != cols || b.Dy() != rows {
		return nil, fmt.Errorf("JPEG frame is %dx%d but the header says %dx%d", b.Dx(), b.Dy(), cols, rows)
	}
	out := make([]int32, rows*cols*spp)
	for y := 0; y < rows; y++ {
		for x := 0; x < cols; x++ {
			i := (y*cols + x) * spp
			if spp == 1 {
				out[i] = int32(color.GrayModel.Convert(img.At(b.Min.X+x, b.Min.Y+y)).(color.Gray).Y)
				continue
			}
			r, g, bl, _ := img.At(b.Min.X+x, b.Min.Y+y).RGBA()
			out[i], out[i+1], out[i+2] = int32(r>>8), int32(g>>8), int32(bl>>8)
		}
	}
	return out, nil
}

// toImage applies the stored-value rules of PS3.5 8.1.1 and PS3.3 C.7.6.3
// and the modality rescale of PS3.3 C.11.1.1.2.
func toImage(inst *midsag.Instance, raw []int32) *midsag.Image {
	rows, cols, spp := inst.Rows, inst.Columns, inst.SamplesPerPixel
	shift := uint(inst.HighBit + 1 - inst.BitsStored)
	mask := int32(1)<<uint(inst.BitsStored) - 1
	signBit := int32(1) << uint(inst.BitsStored-1)
	signed := inst.PixelRepresentation == 1
	lo, hi := int32(0), mask
	if signed {
		lo, hi = -signBit, signBit-1
	}
	slope, icpt := inst.RescaleSlope, inst.RescaleIntercept
	if slope == 0 {
		slope = 1
	}
	invert := inst.Photometric == "MONOCHROME1"
	img := &midsag.Image{Rows: rows, Columns: cols, Pix: make([]float32, rows*cols)}
	for p := 0; p < rows*cols; p++ {
		var sum float64
		for s := 0; s < spp; s++ {
			idx := p*spp + s
			if inst.PlanarConfiguration == 1 {
				idx = s*rows*cols + p
			}
			v := (raw[idx] >> shift) & mask
			if signed && v&signBit != 0 {
				v -= 1 << uint(inst.BitsStored)
			}
			if invert {
				v = hi + lo - v
			}
			sum += float64(v)
		}
		img.Pix[p] = float32(sum/float64(spp)*slope + icpt)
	}
	return img
}
