package preprocess

import (
	"bytes"
	"encoding/binary"
	"fmt"
	"image"
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
	if lib, ok := NeedRebuild[ts]; ok {
		return nil, midsag.Rejectf(midsag.ReasonUnsupportedSyntax, "transfer syntax %s (%s): %s", ts, syntaxNames[ts], lib.Error())
	}
	if _, ok := SupportedSyntaxes[ts]; !ok {
		return nil, midsag.Rejectf(midsag.ReasonUnsupportedSyntax,
			"transfer syntax %s is not decoded by midsag; convert the files to Explicit VR Little Endian with a general DICOM toolkit first", ts)
	}
	if err := refuseJPEGPrecision(inst); err != nil {
		return nil, err
	}
	rows, cols, spp := inst.Rows, inst.Columns, inst.SamplesPerPixel
	if rows <= 0 || cols <= 0 {
		return nil, midsag.Rejectf(midsag.ReasonBadPixelData, "image has no rows or columns")
	}
	if spp != 1 && spp != 3 {
		return nil, midsag.Rejectf(midsag.ReasonBadPixelData, "%d samples per pixel; only 1 or 3 are read", spp)
	}
	switch inst.BitsAllocated {
	case 1, 8, 16:
	default:
		return nil, midsag.Rejectf(midsag.ReasonBadPixelData, "bits allocated %d; only 1, 8 and 16 are read", inst.BitsAllocated)
	}
	if inst.BitsStored < 1 || inst.BitsStored > inst.BitsAllocated || inst.HighBit >= inst.BitsAllocated || inst.HighBit < inst.BitsStored-1 {
		return nil, midsag.Rejectf(midsag.ReasonBadPixelData, "bits stored %d and high bit %d do not fit %d bits allocated",
			inst.BitsStored, inst.HighBit, inst.BitsAllocated)
	}
	sh := frameShape{rows: rows, cols: cols, spp: spp, bitsAllocated: inst.BitsAllocated, photometric: inst.Photometric}
	frame, err := frameBytes(inst)
	if err != nil {
		return nil, err
	}
	var raw []int32
	if inst.Photometric == "YBR_FULL_422" && frameDecoders[ts].decode == nil {
		// Native YBR_FULL_422 stores two luminance samples per chroma
		// pair (PS3.3 C.7.6.3.1.2), which the readers here do not unpack.
		return nil, midsag.Rejectf(midsag.ReasonBadPixelData, "uncompressed YBR_FULL_422 pixel data is not read; convert it to RGB first")
	}
	switch ts {
	case midsag.ImplicitVRLittleEndian, midsag.ExplicitVRLittleEndian, midsag.DeflatedExplicitVRLittleEndian:
		raw, err = native(frame, sh, binary.LittleEndian)
	case midsag.ExplicitVRBigEndian:
		raw, err = native(frame, sh, binary.BigEndian)
	default:
		fd, ok := frameDecoders[ts]
		if !ok {
			return nil, midsag.Rejectf(midsag.ReasonUnsupportedSyntax, "transfer syntax %s has no frame decoder in this binary", ts)
		}
		if fd.minBits > inst.BitsAllocated {
			return nil, midsag.Rejectf(midsag.ReasonBadPixelData, "bits allocated %d cannot hold %s data", inst.BitsAllocated, syntaxNames[ts])
		}
		raw, err = fd.decode(frame, sh)
		if fd.interleaved {
			inst = withPlanar(inst, 0)
		}
	}
	if err != nil {
		if me := midsag.RefusalOf(err); me != nil {
			return nil, me
		}
		return nil, midsag.Reject(midsag.ReasonBadPixelData, "cannot decode pixel data", err)
	}
	return toImage(inst, raw), nil
}

// frameShape is what the DICOM header says one frame holds (PS3.3
// C.7.6.3).
type frameShape struct {
	rows, cols, spp, bitsAllocated int
	photometric                    string
}

// samples is the number of stored values in one frame.
func (s frameShape) samples() int { return s.rows * s.cols * s.spp }

// bytes is the size of one native frame; with Bits Allocated 1 the bits
// are packed and the frame is padded to a whole byte (PS3.5 8.1.1).
func (s frameShape) bytes() int { return (s.samples()*s.bitsAllocated + 7) / 8 }

func (s frameShape) expect() codec.Expect {
	return codec.Expect{Rows: s.rows, Cols: s.cols, Components: s.spp, BitsAllocated: s.bitsAllocated}
}

// frameDecoder decodes one encapsulated frame (PS3.5 A.4) to its stored
// values. The multi-frame selector hands it one frame's bytes.
type frameDecoder struct {
	decode func(frame []byte, sh frameShape) ([]int32, error)
	// interleaved is set when the decoder returns colour samples
	// interleaved by pixel whatever Planar Configuration says.
	interleaved bool
	// minBits is the least Bits Allocated the encoding can hold.
	minBits int
}

// frameDecoders maps each encapsulated transfer syntax to its decoder.
// JPEG 2000 and JPEG-LS are here in every build; without their codecs
// Decode refuses them earlier through NeedRebuild.
var frameDecoders = map[string]frameDecoder{
	midsag.RLELossless:                   {decodeRLEFrame, true, 8},
	midsag.JPEGLossless:                  {jpegLossless, true, 8},
	midsag.JPEGLosslessSV1:               {jpegLossless, true, 8},
	midsag.JPEGBaseline8Bit:              {jpegBaseline, true, 8},
	midsag.JPEGExtended12Bit:             {jpegBaseline, true, 8},
	midsag.DeflatedImageFrameCompression: {deflatedFrame, false, 1},
	midsag.JPEGLSLossless:                {jpegLS, true, 8},
	midsag.JPEGLSNearLossless:            {jpegLS, true, 8},
	midsag.JPEG2000Lossless:              {jpeg2000, true, 8},
	midsag.JPEG2000:                      {jpeg2000, true, 8},
}

// decodeRLEFrame decodes RLE Lossless, which always decodes to planar
// configuration 0 with samples little-endian (PS3.5 G.2).
func decodeRLEFrame(frame []byte, sh frameShape) ([]int32, error) {
	b, err := codec.DecodeRLE(frame, sh.rows, sh.cols, sh.spp, sh.bitsAllocated)
	if err != nil {
		return nil, err
	}
	return native(b, sh, binary.LittleEndian)
}

// deflatedFrame inflates one frame of Deflated Image Frame Compression
// to its native bytes, in the Planar Configuration of the header
// (PS3.5 A.4.13, 8.2.16).
func deflatedFrame(frame []byte, sh frameShape) ([]int32, error) {
	b, err := codec.InflateFrame(frame, sh.bytes())
	if err != nil {
		return nil, err
	}
	return native(b, sh, binary.LittleEndian)
}

// jpegLS decodes JPEG-LS lossless and near-lossless (PS3.5 A.4.3).
func jpegLS(frame []byte, sh frameShape) ([]int32, error) {
	f, err := codec.DecodeJPEGLS(frame, sh.expect())
	if err != nil {
		return nil, err
	}
	return f.Samples, nil
}

// jpeg2000 decodes JPEG 2000 Part 1 (PS3.5 A.4.4). Decoded samples are
// signed when the codestream says so, which toImage's masking and sign
// extension by Bits Stored and Pixel Representation leave unchanged.
func jpeg2000(frame []byte, sh frameShape) ([]int32, error) {
	f, err := codec.DecodeJPEG2000(frame, sh.expect())
	if err != nil {
		return nil, err
	}
	return f.Samples, nil
}

// refuseJPEGPrecision refuses JPEG (ITU-T T.81) frames with 12-bit
// samples, which Go's image/jpeg does not decode. Transfer syntax
// 1.2.840.10008.1.2.4.51 carries 8- or 12-bit samples (PS3.5 A.4.1), so
// the frame's SOF precision decides, before any other check can give
// another reason.
func refuseJPEGPrecision(inst *midsag.Instance) error {
	ts := inst.TransferSyntaxUID
	if ts != midsag.JPEGBaseline8Bit && ts != midsag.JPEGExtended12Bit {
		return nil
	}
	frame, err := frameBytes(inst)
	if err != nil {
		return err
	}
	p, ok := jpegPrecision(frame)
	if !ok || p == 8 {
		return nil
	}
	return midsag.Rejectf(midsag.ReasonUnsupportedSyntax,
		"transfer syntax %s (%s) with %d-bit JPEG samples is not decoded by midsag, whose JPEG decoder reads 8-bit samples only; "+
			"convert the files to Explicit VR Little Endian first, for example with DCMTK's `dcmdjpeg in.dcm out.dcm` or GDCM's `gdcmconv --raw in.dcm out.dcm`",
		ts, syntaxNames[ts], p)
}

// jpegPrecision returns the sample precision P of the first SOF segment
// of a JPEG stream (ITU-T T.81 B.2.2), walking the marker segments after
// SOI (B.1.1.4).
func jpegPrecision(b []byte) (int, bool) {
	if len(b) < 4 || b[0] != 0xFF || b[1] != 0xD8 {
		return 0, false
	}
	for i := 2; i+4 <= len(b); {
		if b[i] != 0xFF {
			return 0, false
		}
		m := b[i+1]
		if m == 0xFF { // fill byte (B.1.1.2)
			i++
			continue
		}
		length := int(b[i+2])<<8 | int(b[i+3])
		// SOF0..SOF15 except DHT (C4), JPG (C8) and DAC (CC).
		if m >= 0xC0 && m <= 0xCF && m != 0xC4 && m != 0xC8 && m != 0xCC {
			if i+4 >= len(b) {
				return 0, false
			}
			return int(b[i+4]), true
		}
		if m == 0xDA || length < 2 {
			return 0, false
		}
		i += 2 + length
	}
	return 0, false
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
		samples := inst.Rows * inst.Columns * inst.SamplesPerPixel
		size := samples * (inst.BitsAllocated / 8)
		start, end := inst.Frame*size, (inst.Frame+1)*size
		if inst.BitsAllocated == 1 {
			// Bits Allocated 1 packs eight samples to a byte and frames
			// follow each other without padding (PS3.5 8.1.1), so a
			// frame starts on a byte only when the bits before it do.
			if inst.Frame*samples%8 != 0 {
				return nil, midsag.Rejectf(midsag.ReasonBadPixelData, "frame %d of a 1-bit image does not start on a byte boundary", inst.Frame+1)
			}
			start, end = inst.Frame*samples/8, ((inst.Frame+1)*samples+7)/8
		}
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

// native reads one frame's stored values. The values are unmasked;
// toImage applies Bits Stored and High Bit. With Bits Allocated 1 the
// first pixel is the least significant bit of the first byte (PS3.5
// 8.1.1, D.2).
func native(b []byte, sh frameShape, bo binary.ByteOrder) ([]int32, error) {
	n := sh.samples()
	if len(b) < sh.bytes() {
		return nil, midsag.Rejectf(midsag.ReasonTruncated, "pixel data has %d bytes, %d needed", len(b), sh.bytes())
	}
	out := make([]int32, n)
	switch sh.bitsAllocated {
	case 1:
		for i := range out {
			out[i] = int32(b[i/8]>>(uint(i)%8)) & 1
		}
	case 8:
		for i := range out {
			out[i] = int32(b[i])
		}
	default:
		for i := range out {
			out[i] = int32(bo.Uint16(b[2*i:]))
		}
	}
	return out, nil
}

// jpegLossless decodes JPEG lossless, process 14 (ITU-T T.81 Annex H).
func jpegLossless(frame []byte, sh frameShape) ([]int32, error) {
	rows, cols, spp := sh.rows, sh.cols, sh.spp
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

// jpegBaseline decodes 8-bit JPEG (ITU-T T.81 processes 1 and 2,
// baseline and extended sequential) with the standard library.
func jpegBaseline(frame []byte, sh frameShape) ([]int32, error) {
	rows, cols, spp := sh.rows, sh.cols, sh.spp
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
			if yc, ok := img.(*image.YCbCr); ok && sh.photometric == "RGB" {
				// RGB in a JPEG frame means the components are R, G and B
				// with no colour transform (PS3.5 8.2.1); image/jpeg
				// assumes YCbCr when no Adobe marker says otherwise.
				yi, ci := yc.YOffset(b.Min.X+x, b.Min.Y+y), yc.COffset(b.Min.X+x, b.Min.Y+y)
				out[i], out[i+1], out[i+2] = int32(yc.Y[yi]), int32(yc.Cb[ci]), int32(yc.Cr[ci])
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
	if spp == 1 {
		// One sample per pixel, the MR case: the loop below without the
		// sample loop and the mean (identical values).
		for p, r := range raw[:rows*cols] {
			v := (r >> shift) & mask
			if signed && v&signBit != 0 {
				v -= 1 << uint(inst.BitsStored)
			}
			if invert {
				v = hi + lo - v
			}
			img.Pix[p] = float32(float64(v)*slope + icpt)
		}
		return img
	}
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
