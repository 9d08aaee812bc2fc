package phantom

import (
	"encoding/binary"
	"fmt"
	"math"
	"sort"
	"strconv"
	"strings"

	"github.com/midsag/midsag"
	"github.com/midsag/midsag/part10"
)

// EnhancedOptions control ToEnhancedMR.
type EnhancedOptions struct {
	// SOPClassUID is midsag.EnhancedMRImageStorage (the default) or
	// midsag.LegacyConvertedEnhancedMRImageStorage.
	SOPClassUID string
	// TransferSyntaxUID is Explicit VR Little Endian (the default) or RLE
	// Lossless.
	TransferSyntaxUID string
	// Shuffle, when nonzero, writes the frames in an order drawn from this
	// seed instead of stack by stack in In-Stack Position order.
	Shuffle int64
	// OffsetTable, for RLE Lossless, is "basic" (the default: a Basic
	// Offset Table), "extended" (an empty Basic Offset Table and the
	// Extended Offset Table (7FE0,0001) with its lengths (7FE0,0002)) or
	// "none" (empty, with one fragment per frame) (PS3.5 A.4).
	OffsetTable string
	// FragmentsPerFrame splits each compressed frame into this many
	// fragments (at least 1; more than 1 needs an offset table).
	FragmentsPerFrame int
}

// ToEnhancedMR converts single-frame MR images written by this package in
// Explicit VR Little Endian into one multi-frame instance: stacks[i] are
// the images of stack i+1, which become frames with Stack ID i+1 and an
// In-Stack Position Number counted along the stack's slice normal (PS3.3
// C.7.6.16.2.2.4). The frames' plane, pixel measures, timing, echo and
// frame type go into the Shared Functional Groups when every frame has the
// same value and into the Per-frame Functional Groups otherwise (PS3.3
// C.7.6.16, C.8.13.5). The new instance keeps the first stack's series and
// takes a new SOP Instance UID.
func ToEnhancedMR(stacks [][]File, o EnhancedOptions) (File, error) {
	o, legacy, err := enhancedDefaults(o)
	if err != nil {
		return File{}, err
	}
	frames, err := enhancedFrames(stacks, o)
	if err != nil {
		return File{}, err
	}
	ref := frames[0]
	for _, im := range frames {
		if im.stack == 1 && im.inStack == 1 {
			ref = im
		}
	}
	d := enhancedImageLevel(ref, o, len(stacks), len(frames), legacy)
	macros := frameMacros()
	if legacy {
		macros = append(macros, legacyMacros()...)
	} else {
		macros = append(macros, mrMacros()...)
	}
	date, tm := ref.str(0x00080023), ref.str(0x00080033)
	shared, per := functionalGroups(frames, macros, legacy, date, tm)
	d = append(d, element{tag: 0x52009229, vr: "SQ", items: []dataset{shared}})
	d = append(d, element{tag: 0x52009230, vr: "SQ", items: per})

	if err := enhancedPixels(&d, frames, o); err != nil {
		return File{}, err
	}
	data, err := encodePart10(d, o.TransferSyntaxUID)
	if err != nil {
		return File{}, err
	}
	return File{Name: "enhanced-" + ref.str(0x0020000E) + ".dcm", Data: data}, nil
}

// enhancedDefaults fills EnhancedOptions' defaults and reports whether
// the class is Legacy Converted Enhanced MR.
func enhancedDefaults(o EnhancedOptions) (EnhancedOptions, bool, error) {
	if o.SOPClassUID == "" {
		o.SOPClassUID = midsag.EnhancedMRImageStorage
	}
	if o.TransferSyntaxUID == "" {
		o.TransferSyntaxUID = midsag.ExplicitVRLittleEndian
	}
	if o.FragmentsPerFrame < 1 {
		o.FragmentsPerFrame = 1
	}
	legacy := o.SOPClassUID == midsag.LegacyConvertedEnhancedMRImageStorage
	if !legacy && o.SOPClassUID != midsag.EnhancedMRImageStorage {
		return o, false, fmt.Errorf("enhanced: SOP Class %s is not an Enhanced MR class", o.SOPClassUID)
	}
	return o, legacy, nil
}

// enhancedFrames reads every stack's images, numbers them by stack and
// by position along the normal, and checks they share one matrix.
func enhancedFrames(stacks [][]File, o EnhancedOptions) ([]*srcImage, error) {
	var frames []*srcImage
	for si, files := range stacks {
		var st []*srcImage
		for _, f := range files {
			im, err := readSimple(f.Data)
			if err != nil {
				return nil, fmt.Errorf("enhanced: %s: %w", f.Name, err)
			}
			im.stack = si + 1
			st = append(st, im)
		}
		if len(st) == 0 {
			return nil, fmt.Errorf("enhanced: stack %d is empty", si+1)
		}
		n := st[0].normal()
		sort.SliceStable(st, func(i, j int) bool { return st[i].along(n) < st[j].along(n) })
		for i, im := range st {
			im.inStack = i + 1
		}
		frames = append(frames, st...)
	}
	if len(frames) == 0 {
		return nil, fmt.Errorf("enhanced: no images")
	}
	if o.Shuffle != 0 {
		r := rngFor("enhanced order", o.Shuffle)
		r.Shuffle(len(frames), func(i, j int) { frames[i], frames[j] = frames[j], frames[i] })
	}
	first := frames[0]
	for _, im := range frames {
		if im.u16(0x00280010) != first.u16(0x00280010) || im.u16(0x00280011) != first.u16(0x00280011) ||
			im.u16(0x00280101) != first.u16(0x00280101) {
			return nil, fmt.Errorf("enhanced: images differ in matrix or bits stored")
		}
	}
	return frames, nil
}

// enhancedImageLevel writes the attributes of the image as a whole:
// those copied from the reference image, the SOP Common, Image Pixel,
// Multi-frame Dimension and Common CT/MR Image Description modules, and
// for Enhanced MR its own modules.
func enhancedImageLevel(ref *srcImage, o EnhancedOptions, nStacks, nFrames int, legacy bool) dataset {
	var d dataset
	// Attributes copied from the first stack's images: Patient (PS3.3
	// C.7.1.1), General Study (C.7.2.1), General Series (C.7.3.1), Frame
	// of Reference (C.7.4.1), General Equipment (C.7.5.1).
	for _, t := range []uint32{0x00080020, 0x00080021, 0x00080023, 0x00080030, 0x00080031, 0x00080033, 0x00080050,
		0x00080060, 0x00080070, 0x00080090, 0x00081030, 0x0008103E, 0x00081090, 0x00100010, 0x00100020, 0x00100030,
		0x00100040, 0x00120062, 0x00120063, 0x00180015, 0x00180087, 0x00181020, 0x00185100, 0x0020000D, 0x0020000E,
		0x00200010, 0x00200011, 0x00200052, 0x00201040} {
		if el, ok := ref.el[t]; ok {
			d = append(d, element{tag: t, vr: el.vr, raw: el.val})
		}
	}
	sop := uidFrom("enhanced", ref.str(0x0020000E), o.SOPClassUID, o.TransferSyntaxUID, o.Shuffle, o.OffsetTable, o.FragmentsPerFrame, nStacks)
	date, tm := ref.str(0x00080023), ref.str(0x00080033)
	d.text(0x00080008, "CS", `ORIGINAL\PRIMARY\M\NONE`)
	d.text(0x00080016, "UI", o.SOPClassUID)
	d.text(0x00080018, "UI", sop)
	d.text(0x00080012, "DA", date)
	d.text(0x00080013, "TM", tm)
	d.text(0x0008002A, "DT", date+tm)
	// Enhanced General Equipment (PS3.3 C.7.5.2).
	d.text(0x00181000, "LO", "0001")
	d.text(0x00200013, "IS", "1")
	d.text(0x00200012, "IS", "1")
	d.is(0x00280008, nFrames)
	// Image Pixel (PS3.3 C.7.6.3), copied.
	for _, t := range []uint32{0x00280002, 0x00280004, 0x00280010, 0x00280011, 0x00280100, 0x00280101, 0x00280102, 0x00280103} {
		if el, ok := ref.el[t]; ok {
			d = append(d, element{tag: t, vr: el.vr, raw: el.val})
		}
	}
	d.text(0x00282110, "CS", "00")
	d.text(0x00280301, "CS", "NO")
	d.text(0x20500020, "CS", "IDENTITY")
	// Acquisition Context (PS3.3 C.7.6.14): type 2, empty.
	d = append(d, element{tag: 0x00400555, vr: "SQ", items: []dataset{}})
	// Multi-frame Dimension (PS3.3 C.7.6.17): frames indexed by stack and
	// in-stack position.
	orgUID := uidFrom("dimension organization", sop)
	d = append(d, element{tag: 0x00209221, vr: "SQ", items: []dataset{{{tag: 0x00209164, vr: "UI", str: orgUID}}}})
	dim := func(ptr uint32, label string) dataset {
		return dataset{
			{tag: 0x00209164, vr: "UI", str: orgUID},
			{tag: 0x00209165, vr: "AT", u16: []uint16{uint16(ptr >> 16), uint16(ptr)}},
			{tag: 0x00209167, vr: "AT", u16: []uint16{0x0020, 0x9111}},
			{tag: 0x00209421, vr: "LO", str: label},
		}
	}
	d = append(d, element{tag: 0x00209222, vr: "SQ", items: []dataset{dim(0x00209056, "Stack ID"), dim(0x00209057, "In-Stack Position Number")}})

	// Common CT/MR Image Description, image level (PS3.3 C.8.16.2),
	// in both IODs.
	d.text(0x00089205, "CS", "MONOCHROME")
	d.text(0x00089206, "CS", "VOLUME")
	d.text(0x00089207, "CS", "NONE")
	d.text(0x00089208, "CS", "MAGNITUDE")
	d.text(0x00089209, "CS", contrastOf(ref.float(0x00180080), ref.float(0x00180081)))
	if !legacy {
		enhancedMRModules(&d, ref)
	}

	return d
}

// macro is one functional group macro: the sequence tag it is stored
// under and its item for one frame.
type macro struct {
	tag uint32
	of  func(im *srcImage) dataset
}

// frameMacros are the macros both Enhanced MR classes carry.
func frameMacros() []macro {
	macros := []macro{
		// Pixel Measures, PS3.3 C.7.6.16.2.1.
		{0x00289110, func(im *srcImage) dataset {
			var m dataset
			for _, t := range []uint32{0x00180050, 0x00180088, 0x00280030} {
				// Spacing Between Slices is type 3 here and must not be
				// zero when present (PS3.3 C.7.6.16.2.1).
				if el, ok := im.el[t]; ok && !(t == 0x00180088 && im.float(t) == 0) {
					m = append(m, element{tag: t, vr: el.vr, raw: el.val})
				}
			}
			return m
		}},
		// Plane Orientation (Patient), PS3.3 C.7.6.16.2.4.
		{0x00209116, func(im *srcImage) dataset {
			return dataset{{tag: 0x00200037, vr: "DS", raw: im.el[0x00200037].val}}
		}},
		// Pixel Value Transformation, PS3.3 C.7.6.16.2.9: identity, as
		// the source images have no rescale.
		{0x00289145, func(im *srcImage) dataset {
			return dataset{{tag: 0x00281052, vr: "DS", str: "0"}, {tag: 0x00281053, vr: "DS", str: "1"}, {tag: 0x00281054, vr: "LO", str: "US"}}
		}},
		// Frame Anatomy, PS3.3 C.7.6.16.2.8: cervical spine (SNOMED CT
		// 122494005, from memory).
		{0x00209071, func(im *srcImage) dataset {
			return dataset{
				{tag: 0x00082218, vr: "SQ", items: []dataset{{
					{tag: 0x00080100, vr: "SH", str: "122494005"},
					{tag: 0x00080102, vr: "SH", str: "SCT"},
					{tag: 0x00080104, vr: "LO", str: "Cervical spine"},
				}}},
				{tag: 0x00209072, vr: "CS", str: "U"},
			}
		}},
	}
	// MR Image Frame Type, PS3.3 C.8.13.5.1 (both IODs).
	macros = append(macros, macro{0x00189226, func(im *srcImage) dataset {
		return dataset{
			{tag: 0x00089007, vr: "CS", str: `ORIGINAL\PRIMARY\M\NONE`},
			{tag: 0x00089205, vr: "CS", str: "MONOCHROME"},
			{tag: 0x00089206, vr: "CS", str: "VOLUME"},
			{tag: 0x00089207, vr: "CS", str: "NONE"},
			{tag: 0x00089208, vr: "CS", str: "MAGNITUDE"},
			{tag: 0x00089209, vr: "CS", str: contrastOf(im.float(0x00180080), im.float(0x00180081))},
		}
	}})
	return macros
}

// legacyMacros are the macros only Legacy Converted Enhanced MR carries.
func legacyMacros() []macro {
	return []macro{
		// Unassigned Shared Converted Attributes, PS3.3
		// C.7.6.16.2.25: the MR Image module attributes (C.8.3.1).
		macro{0x00209170, func(im *srcImage) dataset {
			var m dataset
			for _, t := range []uint32{0x00180020, 0x00180021, 0x00180022, 0x00180023, 0x00180024, 0x00180080,
				0x00180081, 0x00180082, 0x00180083, 0x00180091, 0x00181314} {
				if el, ok := im.el[t]; ok {
					m = append(m, element{tag: t, vr: el.vr, raw: el.val})
				}
			}
			return m
		}},
	}
}

// mrMacros are the macros only Enhanced MR carries.
func mrMacros() []macro {
	return []macro{
		// MR Timing and Related Parameters, PS3.3 C.8.13.5.2.
		macro{0x00189112, func(im *srcImage) dataset {
			return dataset{
				{tag: 0x00180080, vr: "DS", raw: im.el[0x00180080].val},
				{tag: 0x00180091, vr: "IS", raw: im.el[0x00180091].val},
				{tag: 0x00181314, vr: "DS", raw: im.el[0x00181314].val},
				{tag: 0x00189176, vr: "SQ", items: []dataset{{
					{tag: 0x00189177, vr: "CS", str: "STATIC FIELD"},
					{tag: 0x00189178, vr: "CS", str: "IEC_NORMAL"},
				}}},
				{tag: 0x00189239, vr: "SQ", items: []dataset{{
					{tag: 0x00189179, vr: "CS", str: "IEC_WHOLE_BODY"},
					{tag: 0x00189181, vr: "FD", f64: []float64{0.1}},
				}}},
				{tag: 0x00189240, vr: "US", u16: []uint16{uint16(im.float(0x00180091))}},
				{tag: 0x00189241, vr: "US", u16: []uint16{0}},
			}
		}},
		// MR Echo, PS3.3 C.8.13.5.4.
		macro{0x00189114, func(im *srcImage) dataset {
			return dataset{{tag: 0x00189082, vr: "FD", f64: []float64{im.float(0x00180081)}}}
		}},
		// MR Modifier, PS3.3 C.8.13.5.6.
		macro{0x00189115, func(im *srcImage) dataset {
			m := dataset{
				{tag: 0x00189009, vr: "CS", str: "NO"},
				{tag: 0x00189010, vr: "CS", str: "NONE"},
				{tag: 0x00189021, vr: "CS", str: "NO"},
				{tag: 0x00189026, vr: "CS", str: "NONE"},
				{tag: 0x00189027, vr: "CS", str: "NONE"},
				{tag: 0x00189077, vr: "CS", str: "NO"},
				{tag: 0x00189081, vr: "CS", str: "NO"},
			}
			if ti := im.float(0x00180082); ti > 0 {
				m[0].str = "YES"
				m = append(m, element{tag: 0x00189079, vr: "FD", f64: []float64{ti}})
			}
			return m
		}},
		// MR FOV/Geometry, PS3.3 C.8.13.5.3.
		macro{0x00189125, func(im *srcImage) dataset {
			rows, cols := im.u16(0x00280010), im.u16(0x00280011)
			return dataset{
				{tag: 0x00180093, vr: "DS", str: "100"},
				{tag: 0x00180094, vr: "DS", str: "100"},
				{tag: 0x00181312, vr: "CS", str: "COLUMN"},
				{tag: 0x00189058, vr: "US", u16: []uint16{cols}},
				{tag: 0x00189231, vr: "US", u16: []uint16{rows}},
			}
		}},
		// MR Imaging Modifier, PS3.3 C.8.13.5.7.
		macro{0x00189006, func(im *srcImage) dataset {
			return dataset{
				{tag: 0x00180095, vr: "DS", str: "200"},
				{tag: 0x00189020, vr: "CS", str: "NONE"},
				{tag: 0x00189022, vr: "CS", str: "NO"},
				{tag: 0x00189028, vr: "CS", str: "NONE"},
				{tag: 0x00189098, vr: "FD", f64: []float64{42.577 * im.float(0x00180087)}},
			}
		}},
		// MR Receive Coil, PS3.3 C.8.13.5.8.
		macro{0x00189042, func(im *srcImage) dataset {
			return dataset{
				{tag: 0x00181250, vr: "SH", str: "PHANTOM NECK"},
				{tag: 0x00189041, vr: "LO", str: Manufacturer},
				{tag: 0x00189043, vr: "CS", str: "VOLUME"},
				{tag: 0x00189044, vr: "CS", str: "NO"},
			}
		}},
		// MR Transmit Coil, PS3.3 C.8.13.5.9.
		macro{0x00189049, func(im *srcImage) dataset {
			return dataset{
				{tag: 0x00181251, vr: "SH", str: "BODY"},
				{tag: 0x00189050, vr: "LO", str: Manufacturer},
				{tag: 0x00189051, vr: "CS", str: "BODY"},
			}
		}},
		// MR Averages, PS3.3 C.8.13.5.10.
		macro{0x00189119, func(im *srcImage) dataset {
			return dataset{{tag: 0x00180083, vr: "DS", raw: im.el[0x00180083].val}}
		}},
	}
}

// functionalGroups puts each macro into the Shared Functional Groups item
// when every frame has the same value and into the Per-frame Functional
// Groups otherwise (PS3.3 C.7.6.16.1.1), and adds the always per-frame
// Frame Content and Plane Position (and, for Legacy Converted, the
// conversion source).
func functionalGroups(frames []*srcImage, macros []macro, legacy bool, date, tm string) (dataset, []dataset) {
	shared := dataset{}
	per := make([]dataset, len(frames))
	for _, mc := range macros {
		same := true
		v0 := encodeItem(mc.of(frames[0]))
		for _, im := range frames[1:] {
			if encodeItem(mc.of(im)) != v0 {
				same = false
				break
			}
		}
		if same {
			shared = append(shared, element{tag: mc.tag, vr: "SQ", items: []dataset{mc.of(frames[0])}})
			continue
		}
		for i, im := range frames {
			per[i] = append(per[i], element{tag: mc.tag, vr: "SQ", items: []dataset{mc.of(im)}})
		}
	}
	for i, im := range frames {
		// Frame Content, PS3.3 C.7.6.16.2.2 (always per-frame).
		per[i] = append(per[i], element{tag: 0x00209111, vr: "SQ", items: []dataset{{
			{tag: 0x00189074, vr: "DT", str: date + tm},
			{tag: 0x00189151, vr: "DT", str: date + tm},
			{tag: 0x00189220, vr: "FD", f64: []float64{1000}},
			{tag: 0x00209056, vr: "SH", str: strconv.Itoa(im.stack)},
			{tag: 0x00209057, vr: "UL", u32: []uint32{uint32(im.inStack)}},
			{tag: 0x00209157, vr: "UL", u32: []uint32{uint32(im.stack), uint32(im.inStack)}},
		}}})
		// Plane Position (Patient), PS3.3 C.7.6.16.2.3.
		per[i] = append(per[i], element{tag: 0x00209113, vr: "SQ", items: []dataset{{{tag: 0x00200032, vr: "DS", raw: im.el[0x00200032].val}}}})
		if legacy {
			// Conversion Source, PS3.3 C.7.6.16.2.24: the image the
			// frame came from.
			per[i] = append(per[i], element{tag: 0x00209172, vr: "SQ", items: []dataset{{
				{tag: 0x00081150, vr: "UI", str: im.str(0x00080016)},
				{tag: 0x00081155, vr: "UI", str: im.str(0x00080018)},
			}}})
			// Unassigned Per-frame Converted Attributes, PS3.3
			// C.7.6.16.2.26: the source image's Instance Number is the
			// one MR attribute left that differs per frame.
			per[i] = append(per[i], element{tag: 0x00209171, vr: "SQ", items: []dataset{{
				{tag: 0x00200013, vr: "IS", raw: im.el[0x00200013].val},
			}}})
		}
	}
	return shared, per
}

// enhancedMRModules adds the Enhanced MR Image (PS3.3 C.8.13.1) and MR
// Pulse Sequence (C.8.13.4) module attributes of a phantom spin-echo
// acquisition.
func enhancedMRModules(d *dataset, ref *srcImage) {
	d.text(0x00180023, "CS", ref.str(0x00180023))
	*d = append(*d, element{tag: 0x00189073, vr: "FD", f64: []float64{60000}})
	d.text(0x00189004, "CS", "RESEARCH")
	d.text(0x00189005, "SH", strings.TrimLeft(ref.str(0x00180024), "*"))
	d.text(0x00189008, "CS", "SPIN")
	d.text(0x00189011, "CS", "NO")
	d.text(0x00189012, "CS", "NO")
	d.text(0x00189014, "CS", "NO")
	d.text(0x00189015, "CS", "NO")
	d.text(0x00189017, "CS", "NONE")
	d.text(0x00189018, "CS", "NO")
	d.text(0x00189024, "CS", "NO")
	d.text(0x00189025, "CS", "NONE")
	d.text(0x00189029, "CS", "NONE")
	d.text(0x00189032, "CS", "RECTILINEAR")
	d.text(0x00189033, "CS", "FULL")
	d.text(0x00189034, "CS", "LINEAR")
	d.text(0x00189064, "CS", "NONE")
	*d = append(*d, element{tag: 0x00189093, vr: "US", u16: []uint16{1}})
	d.text(0x00189100, "CS", "1H")
	d.text(0x00189174, "CS", "IEC")
}

// contrastOf names Acquisition Contrast (0008,9209) from TR and TE (common
// practice thresholds, as preprocess's series rules).
func contrastOf(tr, te float64) string {
	switch {
	case te >= 60:
		return "T2"
	case tr <= 1000:
		return "T1"
	}
	return "UNKNOWN"
}

// encodeItem is a comparable form of an item, for telling shared macros
// from per-frame ones.
func encodeItem(d dataset) string {
	e := &encoder{explicit: true, order: binary.LittleEndian}
	_ = e.element(element{tag: 0xFFFFFFFF, vr: "SQ", items: []dataset{d}})
	return e.buf.String()
}

// enhancedPixels appends the frames' pixel data in frame order: native
// words one frame after another (PS3.5 8.1.1), or one RLE frame split
// into fragments with the offset table asked for (PS3.5 A.4).
func enhancedPixels(d *dataset, frames []*srcImage, o EnhancedOptions) error {
	rows, cols := int(frames[0].u16(0x00280010)), int(frames[0].u16(0x00280011))
	bits := int(frames[0].u16(0x00280101))
	switch o.TransferSyntaxUID {
	case midsag.ExplicitVRLittleEndian:
		var pix []uint16
		for _, im := range frames {
			pix = append(pix, im.pixels()...)
		}
		*d = append(*d, element{tag: 0x7FE00010, vr: "OW", u16: pix})
		return nil
	case midsag.RLELossless:
	default:
		return fmt.Errorf("enhanced: transfer syntax %s is not written", o.TransferSyntaxUID)
	}
	var frags [][]byte
	var offsets, lengths []uint64
	var at uint64
	for _, im := range frames {
		b, err := encodeFrame(midsag.RLELossless, im.pixels(), rows, cols, bits)
		if err != nil {
			return err
		}
		if len(b)%2 == 1 {
			b = append(b, 0)
		}
		offsets = append(offsets, at)
		lengths = append(lengths, uint64(len(b)))
		// Split on even boundaries: a fragment has even length (PS3.5 A.4).
		n := o.FragmentsPerFrame
		step := (len(b)/n + 1) &^ 1
		for k := 0; k < len(b); k += step {
			f := b[k:min(k+step, len(b))]
			frags = append(frags, f)
			at += 8 + uint64(len(f))
		}
	}
	el := element{tag: 0x7FE00010, vr: "OB", frag: frags}
	switch o.OffsetTable {
	case "", "basic":
		for _, v := range offsets {
			if v > math.MaxUint32 {
				return fmt.Errorf("enhanced: pixel data beyond 4 GiB needs the extended offset table")
			}
			el.bot = append(el.bot, uint32(v))
		}
	case "extended":
		ov := func(v []uint64) []byte {
			b := make([]byte, 8*len(v))
			for i, x := range v {
				binary.LittleEndian.PutUint64(b[8*i:], x)
			}
			return b
		}
		*d = append(*d, element{tag: 0x7FE00001, vr: "OV", raw: ov(offsets)}, element{tag: 0x7FE00002, vr: "OV", raw: ov(lengths)})
	case "none":
		if o.FragmentsPerFrame > 1 {
			return fmt.Errorf("enhanced: several fragments per frame need an offset table")
		}
	default:
		return fmt.Errorf("enhanced: offset table %q is not one of basic, extended, none", o.OffsetTable)
	}
	*d = append(*d, el)
	return nil
}

// srcImage is one single-frame image read back for conversion.
type srcImage struct {
	el             map[uint32]rawElement
	stack, inStack int
}

type rawElement struct {
	vr  string
	val []byte
}

// readSimple reads the top-level elements of an Explicit VR Little Endian
// Part 10 file without sequences, as this package writes them.
func readSimple(b []byte) (*srcImage, error) {
	m, body, err := part10.Parse(b)
	if err != nil {
		return nil, err
	}
	if m.TransferSyntaxUID != midsag.ExplicitVRLittleEndian {
		return nil, fmt.Errorf("transfer syntax %s: only Explicit VR Little Endian images are converted", m.TransferSyntaxUID)
	}
	im := &srcImage{el: map[uint32]rawElement{}}
	for off := 0; off+8 <= len(body); {
		tag := uint32(binary.LittleEndian.Uint16(body[off:]))<<16 | uint32(binary.LittleEndian.Uint16(body[off+2:]))
		vr := string(body[off+4 : off+6])
		var n, hl int
		if longLength(vr) {
			if off+12 > len(body) {
				return nil, fmt.Errorf("element (%08X) cut short", tag)
			}
			n, hl = int(binary.LittleEndian.Uint32(body[off+8:])), 12
		} else {
			n, hl = int(binary.LittleEndian.Uint16(body[off+6:])), 8
		}
		if n < 0 || off+hl+n > len(body) || vr == "SQ" {
			return nil, fmt.Errorf("element (%08X): sequence or bad length", tag)
		}
		im.el[tag] = rawElement{vr: vr, val: body[off+hl : off+hl+n]}
		off += hl + n
	}
	for _, t := range []uint32{0x00200032, 0x00200037, 0x00280010, 0x00280011, 0x7FE00010} {
		if _, ok := im.el[t]; !ok {
			return nil, fmt.Errorf("no (%04X,%04X)", t>>16, t&0xFFFF)
		}
	}
	return im, nil
}

func (im *srcImage) str(t uint32) string {
	return strings.TrimRight(string(im.el[t].val), "\x00 ")
}

func (im *srcImage) floats(t uint32) []float64 {
	var out []float64
	for _, s := range strings.Split(im.str(t), `\`) {
		f, err := strconv.ParseFloat(strings.TrimSpace(s), 64)
		if err == nil {
			out = append(out, f)
		}
	}
	return out
}

func (im *srcImage) float(t uint32) float64 {
	if f := im.floats(t); len(f) > 0 {
		return f[0]
	}
	return 0
}

func (im *srcImage) u16(t uint32) uint16 {
	if v := im.el[t].val; len(v) >= 2 {
		return binary.LittleEndian.Uint16(v)
	}
	return 0
}

func (im *srcImage) pixels() []uint16 {
	v := im.el[0x7FE00010].val
	out := make([]uint16, len(v)/2)
	for i := range out {
		out[i] = binary.LittleEndian.Uint16(v[2*i:])
	}
	return out
}

// normal is the slice normal, row direction × column direction (PS3.3
// C.7.6.2.1.1).
func (im *srcImage) normal() vec {
	o := im.floats(0x00200037)
	if len(o) != 6 {
		return vec{}
	}
	return vec{o[0], o[1], o[2]}.cross(vec{o[3], o[4], o[5]})
}

func (im *srcImage) along(n vec) float64 {
	p := im.floats(0x00200032)
	if len(p) != 3 {
		return 0
	}
	return vec{p[0], p[1], p[2]}.dot(n)
}
