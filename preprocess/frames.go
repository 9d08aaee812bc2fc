package preprocess

import (
	"encoding/binary"
	"strings"

	"github.com/suyashkumar/dicom"
	"github.com/suyashkumar/dicom/pkg/tag"

	"github.com/midsag/midsag"
)

// items returns the items of the sequence t in a, each as attrs; nil when
// t is absent or not a sequence.
func (a attrs) items(t tag.Tag) []attrs {
	e, err := a.ds.FindElementByTag(t)
	if err != nil {
		return nil
	}
	seq, ok := e.Value.GetValue().([]*dicom.SequenceItemValue)
	if !ok {
		return nil
	}
	out := make([]attrs, 0, len(seq))
	for _, it := range seq {
		if els, ok := it.GetValue().([]*dicom.Element); ok {
			out = append(out, attrs{ds: dicom.Dataset{Elements: els}})
		}
	}
	return out
}

// item returns the first item of the sequence t, as the functional group
// macros hold exactly one (PS3.3 C.7.6.16.2).
func (a attrs) item(t tag.Tag) (attrs, bool) {
	it := a.items(t)
	if len(it) == 0 {
		return attrs{}, false
	}
	return it[0], true
}

func (a attrs) has(t tag.Tag) bool {
	_, err := a.ds.FindElementByTag(t)
	return err == nil
}

// setFloat sets *dst to the element's value when the element is present
// (def when its value does not parse) and leaves *dst alone when it is not.
func (a attrs) setFloat(t tag.Tag, dst *float64, def float64) {
	if a.has(t) {
		*dst = a.float(t, def)
	}
}

// frameGroups reads the Multi-frame Functional Groups module (PS3.3
// C.7.6.16) of an Enhanced MR (PS3.3 A.36.2, C.8.13) or Legacy Converted
// Enhanced MR (PS3.3 A.71) instance into inst.PerFrame: for each frame, the
// top-level attributes, overridden by the Shared Functional Groups
// Sequence (5200,9229), overridden by the frame's item of the Per-frame
// Functional Groups Sequence (5200,9230). Other SOP classes are left as
// they are; series picking refuses their multi-frame instances.
func frameGroups(a attrs, inst *midsag.Instance) error {
	if !midsag.FramesAsSlices(inst.SOPClassUID) {
		return nil
	}
	per := a.items(tag.PerFrameFunctionalGroupsSequence)
	shared, hasShared := a.item(tag.SharedFunctionalGroupsSequence)
	if len(per) == 0 && !hasShared {
		// Without functional groups no frame has a plane; the frames
		// stay one instance without geometry, which picking excludes.
		return nil
	}
	if len(per) != inst.NumberOfFrames {
		// One item per frame, in frame order (PS3.3 C.7.6.16).
		return midsag.Rejectf(midsag.ReasonInconsistentGeometry,
			"Per-frame Functional Groups Sequence has %d items for %d frames (PS3.3 C.7.6.16)", len(per), inst.NumberOfFrames)
	}
	base := midsag.FrameAttrs{
		ImageOrientation:     inst.ImageOrientation,
		ImagePosition:        inst.ImagePosition,
		HasGeometry:          inst.HasGeometry,
		PixelSpacing:         inst.PixelSpacing,
		SliceThickness:       inst.SliceThickness,
		SpacingBetweenSlices: inst.SpacingBetweenSlices,
		RepetitionTime:       inst.RepetitionTime,
		EchoTime:             inst.EchoTime,
		InversionTime:        inst.InversionTime,
		FlipAngle:            inst.FlipAngle,
		DiffusionBValue:      inst.DiffusionBValue,
		HasDiffusionBValue:   inst.HasDiffusionBValue,
		ImageType:            inst.ImageType,
		RescaleSlope:         inst.RescaleSlope,
		RescaleIntercept:     inst.RescaleIntercept,
	}
	var g geom
	if hasShared {
		g = applyGroup(shared, &base, g)
		// A Legacy Converted image keeps the source images' sequence
		// attributes, the same for every frame, in Unassigned Shared
		// Converted Attributes (PS3.3 C.7.6.16.2.25); the top level wins
		// where it has them.
		if u, ok := shared.item(tag.UnassignedSharedConvertedAttributesSequence); ok {
			if len(inst.ScanningSequence) == 0 {
				inst.ScanningSequence = u.strs(tag.ScanningSequence)
			}
			if len(inst.SequenceVariant) == 0 {
				inst.SequenceVariant = u.strs(tag.SequenceVariant)
			}
			if inst.SequenceName == "" {
				inst.SequenceName = u.str(tag.SequenceName)
			}
			if inst.MRAcquisitionType == "" {
				inst.MRAcquisitionType = strings.ToUpper(u.str(tag.MRAcquisitionType))
			}
		}
	}
	inst.PerFrame = make([]midsag.FrameAttrs, len(per))
	for i, it := range per {
		f := base
		fg := applyGroup(it, &f, g)
		f.HasGeometry = inst.HasGeometry || (fg.position && fg.orientation)
		inst.PerFrame[i] = f
	}
	return nil
}

// geom records which plane macros have been seen for a frame, so that a
// position from one group and an orientation from the other make a plane.
type geom struct{ position, orientation bool }

// applyGroup applies one functional groups item (shared or per-frame) over
// f. Each macro present replaces the values it carries (PS3.3 C.7.6.16.1:
// a macro is either shared or per-frame, and a per-frame value is the one
// that holds for its frame).
func applyGroup(g attrs, f *midsag.FrameAttrs, seen geom) geom {
	seen = applyPlane(g, f, seen)
	applyMR(g, f)
	applyContent(g, f)
	applyConverted(g, f)
	return seen
}

// applyPlane applies the plane and pixel measures macros.
func applyPlane(g attrs, f *midsag.FrameAttrs, seen geom) geom {
	// Plane Position (Patient) macro, PS3.3 C.7.6.16.2.3.
	if it, ok := g.item(tag.PlanePositionSequence); ok {
		if v := it.floats(tag.ImagePositionPatient); len(v) == 3 {
			copy(f.ImagePosition[:], v)
			seen.position = true
		}
	}
	// Plane Orientation (Patient) macro, PS3.3 C.7.6.16.2.4.
	if it, ok := g.item(tag.PlaneOrientationSequence); ok {
		if v := it.floats(tag.ImageOrientationPatient); len(v) == 6 {
			copy(f.ImageOrientation[:], v)
			seen.orientation = true
		}
	}
	// Pixel Measures macro, PS3.3 C.7.6.16.2.1.
	if it, ok := g.item(tag.PixelMeasuresSequence); ok {
		if v := it.floats(tag.PixelSpacing); len(v) == 2 {
			copy(f.PixelSpacing[:], v)
		}
		it.setFloat(tag.SliceThickness, &f.SliceThickness, 0)
		it.setFloat(tag.SpacingBetweenSlices, &f.SpacingBetweenSlices, 0)
	}
	return seen
}

// applyMR applies the MR macros: timing, echo, modifier, diffusion and
// frame type (PS3.3 C.8.13.5).
func applyMR(g attrs, f *midsag.FrameAttrs) {
	// MR Timing and Related Parameters macro, PS3.3 C.8.13.5.2.
	if it, ok := g.item(tag.MRTimingAndRelatedParametersSequence); ok {
		it.setFloat(tag.RepetitionTime, &f.RepetitionTime, 0)
		it.setFloat(tag.FlipAngle, &f.FlipAngle, 0)
	}
	// MR Echo macro, PS3.3 C.8.13.5.4: Effective Echo Time is the TE that
	// sets the contrast.
	if it, ok := g.item(tag.MREchoSequence); ok && it.has(tag.EffectiveEchoTime) {
		f.EchoTime = it.float(tag.EffectiveEchoTime, 0)
	}
	// MR Modifier macro, PS3.3 C.8.13.5.6: Inversion Times (0018,9079).
	if it, ok := g.item(tag.MRModifierSequence); ok {
		if v := it.floats(tag.InversionTimes); len(v) > 0 {
			f.InversionTime = v[0]
		} else if strings.EqualFold(it.str(tag.InversionRecovery), "NO") {
			f.InversionTime = 0
		}
	}
	// MR Diffusion macro, PS3.3 C.8.13.5.9.
	if it, ok := g.item(tag.MRDiffusionSequence); ok {
		if v := it.floats(tag.DiffusionBValue); len(v) > 0 {
			f.DiffusionBValue, f.HasDiffusionBValue = v[0], true
		}
	}
	// MR Image Frame Type macro, PS3.3 C.8.13.5.1: Frame Type has the
	// values of Image Type for the frame.
	if it, ok := g.item(tag.MRImageFrameTypeSequence); ok {
		if v := it.strs(tag.FrameType); len(v) > 0 {
			f.ImageType = v
		}
	}
}

// applyContent applies the Pixel Value Transformation and Frame Content
// macros.
func applyContent(g attrs, f *midsag.FrameAttrs) {
	// Pixel Value Transformation macro, PS3.3 C.7.6.16.2.9.
	if it, ok := g.item(tag.PixelValueTransformationSequence); ok {
		it.setFloat(tag.RescaleSlope, &f.RescaleSlope, 1)
		it.setFloat(tag.RescaleIntercept, &f.RescaleIntercept, 0)
	}
	// Frame Content macro, PS3.3 C.7.6.16.2.2 (per-frame only).
	if it, ok := g.item(tag.FrameContentSequence); ok {
		f.StackID = it.str(tag.StackID)
		f.InStackPosition = it.int(tag.InStackPositionNumber, 0)
		if v := it.floats(tag.DimensionIndexValues); len(v) > 0 {
			f.DimensionIndex = make([]int, len(v))
			for k, x := range v {
				f.DimensionIndex[k] = int(x)
			}
		}
	}
}

// applyConverted applies the converted-attributes macros of a Legacy
// Converted Enhanced image.
func applyConverted(g attrs, f *midsag.FrameAttrs) {
	// Unassigned Shared and Per-frame Converted Attributes macros of a
	// Legacy Converted Enhanced image (PS3.3 C.7.6.16.2.24, C.7.6.16.2.25)
	// keep the source images' MR Image module attributes (PS3.3 C.8.3.1)
	// that have no functional group of their own.
	for _, t := range []tag.Tag{tag.UnassignedSharedConvertedAttributesSequence, tag.UnassignedPerFrameConvertedAttributesSequence} {
		it, ok := g.item(t)
		if !ok {
			continue
		}
		it.setFloat(tag.RepetitionTime, &f.RepetitionTime, 0)
		it.setFloat(tag.EchoTime, &f.EchoTime, 0)
		it.setFloat(tag.InversionTime, &f.InversionTime, 0)
		it.setFloat(tag.FlipAngle, &f.FlipAngle, 0)
	}
}

// offsetTable returns the frame offsets of encapsulated pixel data: the
// Extended Offset Table (7FE0,0001) when present, else the Basic Offset
// Table, the first item of the Pixel Data value (PS3.5 A.4). Both hold
// the offset of each frame's first fragment item relative to the first
// fragment's item tag. Encapsulated syntaxes are little endian (PS3.5
// A.4), so the tables are read little endian. body is the data set the
// elements of ds were parsed from.
func offsetTable(ds dicom.Dataset, body []byte, explicit bool) []uint64 {
	if e, err := ds.FindElementByTag(tag.ExtendedOffsetTable); err == nil {
		if b, ok := e.Value.GetValue().([]byte); ok && len(b) >= 8 {
			out := make([]uint64, len(b)/8)
			for i := range out {
				out[i] = binary.LittleEndian.Uint64(b[8*i:])
			}
			return out
		}
	}
	bot := basicOffsetTable(body, explicit)
	if len(bot) < 4 {
		return nil
	}
	out := make([]uint64, len(bot)/4)
	for i := range out {
		out[i] = uint64(binary.LittleEndian.Uint32(bot[4*i:]))
	}
	return out
}

// basicOffsetTable returns the value of the first item of the top-level
// encapsulated Pixel Data element of a little-endian data set body, or nil.
func basicOffsetTable(body []byte, explicit bool) []byte {
	w := walker{data: body, explicit: explicit, bo: binary.LittleEndian}
	off, hdr, err := w.pixelData(0)
	if err != nil {
		return nil
	}
	at := off + hdr
	if at+8 > len(body) {
		return nil
	}
	it := uint32(w.bo.Uint16(body[at:]))<<16 | uint32(w.bo.Uint16(body[at+2:]))
	n := int(w.bo.Uint32(body[at+4:]))
	if it != tagItem || n < 0 || at+8+n > len(body) {
		return nil
	}
	return body[at+8 : at+8+n]
}
