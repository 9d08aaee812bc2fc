package preprocess

import (
	"bytes"
	"compress/flate"
	"encoding/binary"
	"errors"
	"fmt"
	"io"
	"strconv"
	"strings"

	"github.com/suyashkumar/dicom"
	"github.com/suyashkumar/dicom/pkg/tag"

	"github.com/midsag/midsag"
)

// Read parses one DICOM Part 10 stream (PS3.10 7.1) into an Instance. Pixel
// data is kept as stored and decoded only if the instance's series is
// picked. Every refusal is a *midsag.Error with a reason code; a panic in
// the parser is turned into a not_dicom refusal.
func (p *Preprocessor) Read(name string, r io.Reader) (*midsag.Instance, error) {
	lim := p.opts.Limits
	data, err := io.ReadAll(io.LimitReader(r, lim.MaxFileBytes+1))
	if err != nil {
		return nil, fmt.Errorf("read %s: %w", name, err)
	}
	if int64(len(data)) > lim.MaxFileBytes {
		return nil, midsag.Rejectf(midsag.ReasonTooLarge, "file is larger than the %d-byte limit", lim.MaxFileBytes)
	}
	return p.parse(data)
}

// sniff names common non-DICOM formats so a refusal says what the file is.
func sniff(data []byte) string {
	switch {
	case len(data) == 0:
		return "the file is empty"
	case bytes.HasPrefix(data, []byte{0x1f, 0x8b}):
		return "the file is gzip-compressed; unpack it first"
	case bytes.HasPrefix(data, []byte("\x89PNG")):
		return "the file is a PNG image, not DICOM"
	case bytes.HasPrefix(data, []byte("PK\x03\x04")):
		return "the file is a zip archive; give it as the only input"
	case bytes.HasPrefix(data, []byte{0xff, 0xd8}):
		return "the file is a JPEG image, not DICOM"
	}
	return "no \"DICM\" prefix after the 128-byte preamble (PS3.10 7.1)"
}

func isUpper(b byte) bool { return b >= 'A' && b <= 'Z' }

// meta is what midsag needs from the File Meta Information (PS3.10 7.1).
type meta struct {
	transferSyntax string
	bodyOffset     int
}

// readMeta parses the group 0002 elements, always Explicit VR Little
// Endian (PS3.10 7.1), starting at off.
func readMeta(data []byte, off int) (meta, error) {
	m := meta{bodyOffset: off}
	for off+8 <= len(data) && binary.LittleEndian.Uint16(data[off:]) == 0x0002 {
		elem := binary.LittleEndian.Uint16(data[off+2:])
		vr := string(data[off+4 : off+6])
		var length, hdr int
		if longVR[vr] {
			if off+12 > len(data) {
				return m, midsag.Rejectf(midsag.ReasonTruncated, "file meta information is cut short")
			}
			length, hdr = int(binary.LittleEndian.Uint32(data[off+8:])), 12
		} else {
			length, hdr = int(binary.LittleEndian.Uint16(data[off+6:])), 8
		}
		if length < 0 || off+hdr+length > len(data) {
			return m, midsag.Rejectf(midsag.ReasonTruncated, "file meta element (0002,%04X) runs past the end", elem)
		}
		if elem == 0x0010 {
			m.transferSyntax = strings.TrimRight(string(data[off+hdr:off+hdr+length]), "\x00 ")
		}
		off += hdr + length
	}
	m.bodyOffset = off
	return m, nil
}

func (p *Preprocessor) parse(data []byte) (inst *midsag.Instance, err error) {
	var m meta
	switch {
	case len(data) >= 132 && string(data[128:132]) == "DICM":
		if m, err = readMeta(data, 132); err != nil {
			return nil, err
		}
	case !p.opts.Lenient:
		return nil, midsag.Rejectf(midsag.ReasonNotDICOM, "%s", sniff(data))
	case len(data) >= 8 && binary.LittleEndian.Uint16(data) == 0x0002:
		if m, err = readMeta(data, 0); err != nil {
			return nil, err
		}
	default:
		// No meta information: PS3.5 10.1 makes Implicit VR Little Endian
		// the default; a VR after the first tag shows explicit VR.
		if len(data) < 8 || binary.LittleEndian.Uint16(data) > 0x0028 {
			return nil, midsag.Rejectf(midsag.ReasonNotDICOM, "%s, and the data does not start like a data set", sniff(data))
		}
		if isUpper(data[4]) && isUpper(data[5]) {
			m.transferSyntax = midsag.ExplicitVRLittleEndian
		}
	}
	if m.transferSyntax == "" {
		m.transferSyntax = midsag.ImplicitVRLittleEndian
	}
	body := data[m.bodyOffset:]
	if m.transferSyntax == midsag.DeflatedExplicitVRLittleEndian {
		// PS3.5 A.5: the data set after the meta information is raw deflate.
		fr := flate.NewReader(bytes.NewReader(body))
		body, err = io.ReadAll(io.LimitReader(fr, p.opts.Limits.MaxFileBytes+1))
		if err != nil {
			return nil, midsag.Reject(midsag.ReasonTruncated, "deflated data set does not inflate", err)
		}
		if int64(len(body)) > p.opts.Limits.MaxFileBytes {
			return nil, midsag.Rejectf(midsag.ReasonTooLarge, "deflated data set inflates beyond the %d-byte limit", p.opts.Limits.MaxFileBytes)
		}
	}
	var bo binary.ByteOrder = binary.LittleEndian
	implicit := m.transferSyntax == midsag.ImplicitVRLittleEndian
	if m.transferSyntax == midsag.ExplicitVRBigEndian {
		bo = binary.BigEndian
	}
	sc := scanner{data: body, explicit: !implicit, bo: bo, maxElem: p.opts.Limits.MaxElementBytes}
	if _, err := sc.dataset(0, len(body), 0); err != nil {
		return nil, err
	}
	parseTS := m.transferSyntax
	if parseTS == midsag.DeflatedExplicitVRLittleEndian {
		parseTS = midsag.ExplicitVRLittleEndian // already inflated above
	}
	ds, err := parseDataset(body, parseTS)
	if err != nil {
		return nil, err
	}
	inst, err = p.instance(ds)
	if err != nil {
		return nil, err
	}
	inst.TransferSyntaxUID = m.transferSyntax
	return inst, nil
}

// parseDataset runs the DICOM parser over a data set body, converting a
// panic inside it into a refusal. The body is preceded by a minimal file
// meta information group naming its transfer syntax (PS3.10 7.1): without
// one the parser guesses the syntax by trial parses, which is slow and
// allocates.
func parseDataset(body []byte, ts string) (ds dicom.Dataset, err error) {
	defer func() {
		if r := recover(); r != nil {
			// The panic's own text is Go runtime detail, not a reason a
			// person can act on, so the refusal does not repeat it.
			err = midsag.Rejectf(midsag.ReasonNotDICOM, "the data set is malformed: the DICOM parser could not read it")
		}
	}()
	head := metaHeader(ts)
	parser, err := dicom.NewParser(io.MultiReader(bytes.NewReader(head), bytes.NewReader(body)), int64(len(head)+len(body)), nil,
		dicom.SkipProcessingPixelDataValue(), dicom.AllowUnknownSpecificCharacterSet(), dicom.AllowMismatchPixelDataLength())
	if err != nil {
		return ds, midsag.Reject(midsag.ReasonNotDICOM, "cannot start parsing", err)
	}
	var elems []*dicom.Element
	for {
		e, err := parser.Next()
		if err != nil {
			if errors.Is(err, dicom.ErrorEndOfDICOM) || errors.Is(err, io.EOF) {
				break
			}
			if errors.Is(err, io.ErrUnexpectedEOF) {
				return ds, midsag.Reject(midsag.ReasonTruncated, "data set ends inside an element", err)
			}
			return ds, midsag.Reject(midsag.ReasonNotDICOM, "cannot parse data set", err)
		}
		elems = append(elems, e)
	}
	return dicom.Dataset{Elements: elems}, nil
}

// metaHeader returns a preamble, "DICM" and a group 0002 holding only its
// group length and the transfer syntax UID, in Explicit VR Little Endian.
func metaHeader(ts string) []byte {
	if len(ts)%2 == 1 {
		ts += "\x00"
	}
	tsElem := binary.LittleEndian.AppendUint16(nil, 0x0002)
	tsElem = binary.LittleEndian.AppendUint16(tsElem, 0x0010)
	tsElem = append(tsElem, 'U', 'I')
	tsElem = binary.LittleEndian.AppendUint16(tsElem, uint16(len(ts)))
	tsElem = append(tsElem, ts...)
	b := make([]byte, 128, 128+4+12+len(tsElem))
	b = append(b, "DICM"...)
	b = binary.LittleEndian.AppendUint16(b, 0x0002)
	b = binary.LittleEndian.AppendUint16(b, 0x0000)
	b = append(b, 'U', 'L')
	b = binary.LittleEndian.AppendUint16(b, 4)
	b = binary.LittleEndian.AppendUint32(b, uint32(len(tsElem)))
	return append(b, tsElem...)
}

// instance extracts the attributes midsag uses and checks the limits on
// image size and frames.
func (p *Preprocessor) instance(ds dicom.Dataset) (*midsag.Instance, error) {
	a := attrs{ds: ds}
	inst := &midsag.Instance{
		SOPClassUID:                 a.str(tag.SOPClassUID),
		SOPInstanceUID:              a.str(tag.SOPInstanceUID),
		StudyInstanceUID:            a.str(tag.StudyInstanceUID),
		SeriesInstanceUID:           a.str(tag.SeriesInstanceUID),
		Modality:                    a.str(tag.Modality),
		SeriesNumber:                a.int(tag.SeriesNumber, 0),
		SeriesDescription:           a.str(tag.SeriesDescription),
		InstanceNumber:              a.int(tag.InstanceNumber, 0),
		ImageType:                   a.strs(tag.ImageType),
		DerivationDescription:       a.str(tag.DerivationDescription),
		DerivationCodes:             a.codes(tag.DerivationCodeSequence),
		SliceThickness:              a.float(tag.SliceThickness, 0),
		SpacingBetweenSlices:        a.float(tag.SpacingBetweenSlices, 0),
		RepetitionTime:              a.float(tag.RepetitionTime, 0),
		EchoTime:                    a.float(tag.EchoTime, 0),
		InversionTime:               a.float(tag.InversionTime, 0),
		ScanningSequence:            a.strs(tag.ScanningSequence),
		SequenceVariant:             a.strs(tag.SequenceVariant),
		MagneticField:               a.float(tag.MagneticFieldStrength, 0),
		MRAcquisitionType:           strings.ToUpper(a.str(tag.MRAcquisitionType)),
		FlipAngle:                   a.float(tag.FlipAngle, 0),
		SequenceName:                a.str(tag.SequenceName),
		PulseSequenceName:           a.str(tag.PulseSequenceName),
		EchoPulseSequence:           strings.ToUpper(a.str(tag.EchoPulseSequence)),
		LossyImageCompression:       a.str(tag.LossyImageCompression),
		LossyImageCompressionMethod: a.strs(tag.LossyImageCompressionMethod),
		EchoPlanarPulseSequence:     strings.ToUpper(a.str(tag.EchoPlanarPulseSequence)),
		AcquisitionNumber:           a.int(tag.AcquisitionNumber, 0),
		ImagesInAcquisition:         a.int(tag.ImagesInAcquisition, 0),
		Rows:                        a.int(tag.Rows, 0),
		Columns:                     a.int(tag.Columns, 0),
		NumberOfFrames:              a.int(tag.NumberOfFrames, 1),
		SamplesPerPixel:             a.int(tag.SamplesPerPixel, 1),
		BitsAllocated:               a.int(tag.BitsAllocated, 0),
		BitsStored:                  a.int(tag.BitsStored, 0),
		HighBit:                     a.int(tag.HighBit, -1),
		PixelRepresentation:         a.int(tag.PixelRepresentation, 0),
		Photometric:                 strings.TrimSpace(a.str(tag.PhotometricInterpretation)),
		RescaleSlope:                a.float(tag.RescaleSlope, 1),
		RescaleIntercept:            a.float(tag.RescaleIntercept, 0),
		PlanarConfiguration:         a.int(tag.PlanarConfiguration, 0),
	}
	if inst.SOPInstanceUID == "" {
		return nil, midsag.Rejectf(midsag.ReasonNotDICOM, "no SOP Instance UID (0008,0018)")
	}
	if b := a.floats(tag.DiffusionBValue); len(b) > 0 {
		inst.DiffusionBValue, inst.HasDiffusionBValue = b[0], true
	}
	inst.Patient = midsag.PatientStudy{
		PatientName:            a.str(tag.PatientName),
		PatientID:              a.str(tag.PatientID),
		PatientBirthDate:       a.str(tag.PatientBirthDate),
		PatientSex:             a.str(tag.PatientSex),
		StudyDate:              a.str(tag.StudyDate),
		StudyTime:              a.str(tag.StudyTime),
		StudyID:                a.str(tag.StudyID),
		AccessionNumber:        a.str(tag.AccessionNumber),
		ReferringPhysicianName: a.str(tag.ReferringPhysicianName),
	}
	if iop := a.floats(tag.ImageOrientationPatient); len(iop) == 6 {
		if ipp := a.floats(tag.ImagePositionPatient); len(ipp) == 3 {
			copy(inst.ImageOrientation[:], iop)
			copy(inst.ImagePosition[:], ipp)
			inst.HasGeometry = true
		}
	}
	if ps := a.floats(tag.PixelSpacing); len(ps) == 2 {
		copy(inst.PixelSpacing[:], ps)
		inst.HasPixelSpacing = true
	}
	if inst.BitsStored == 0 {
		inst.BitsStored = inst.BitsAllocated
	}
	if inst.HighBit < 0 {
		inst.HighBit = inst.BitsStored - 1
	}
	if int64(inst.Rows)*int64(inst.Columns) > p.opts.Limits.MaxPixels {
		return nil, midsag.Rejectf(midsag.ReasonTooLarge, "image is %d x %d pixels, above the %d-pixel limit", inst.Rows, inst.Columns, p.opts.Limits.MaxPixels)
	}
	if inst.NumberOfFrames > p.opts.Limits.MaxFrames {
		return nil, midsag.Rejectf(midsag.ReasonTooLarge, "%d frames, above the limit of %d", inst.NumberOfFrames, p.opts.Limits.MaxFrames)
	}
	if e, err := ds.FindElementByTag(tag.PixelData); err == nil {
		if info, ok := e.Value.GetValue().(dicom.PixelDataInfo); ok {
			if info.IntentionallyUnprocessed {
				inst.PixelData = info.UnprocessedValueData
			}
			for _, f := range info.Frames {
				if f.Encapsulated {
					inst.Fragments = append(inst.Fragments, f.EncapsulatedData.Data)
				}
			}
		}
	}
	return inst, nil
}

// attrs reads typed values from a top-level data set, tolerating absent or
// malformed elements (they read as the given default).
type attrs struct{ ds dicom.Dataset }

func (a attrs) strs(t tag.Tag) []string {
	e, err := a.ds.FindElementByTag(t)
	if err != nil {
		return nil
	}
	switch v := e.Value.GetValue().(type) {
	case []string:
		out := make([]string, 0, len(v))
		for _, s := range v {
			out = append(out, strings.TrimRight(s, "\x00 "))
		}
		return out
	case []int:
		out := make([]string, 0, len(v))
		for _, n := range v {
			out = append(out, strconv.Itoa(n))
		}
		return out
	case []float64:
		out := make([]string, 0, len(v))
		for _, f := range v {
			out = append(out, strconv.FormatFloat(f, 'g', -1, 64))
		}
		return out
	}
	return nil
}

// codes returns "scheme:value" for each item of a code sequence (PS3.3
// 8.8: Code Value (0008,0100), Coding Scheme Designator (0008,0102)).
func (a attrs) codes(t tag.Tag) []string {
	e, err := a.ds.FindElementByTag(t)
	if err != nil {
		return nil
	}
	items, ok := e.Value.GetValue().([]*dicom.SequenceItemValue)
	if !ok {
		return nil
	}
	var out []string
	for _, it := range items {
		elems, ok := it.GetValue().([]*dicom.Element)
		if !ok {
			continue
		}
		item := attrs{ds: dicom.Dataset{Elements: elems}}
		if v := item.str(tag.CodeValue); v != "" {
			out = append(out, item.str(tag.CodingSchemeDesignator)+":"+v)
		}
	}
	return out
}

func (a attrs) str(t tag.Tag) string {
	s := a.strs(t)
	if len(s) == 0 {
		return ""
	}
	return strings.TrimSpace(strings.Join(s, "\\"))
}

func (a attrs) floats(t tag.Tag) []float64 {
	var out []float64
	for _, s := range a.strs(t) {
		f, err := strconv.ParseFloat(strings.TrimSpace(s), 64)
		if err != nil {
			return nil
		}
		out = append(out, f)
	}
	return out
}

func (a attrs) float(t tag.Tag, def float64) float64 {
	if f := a.floats(t); len(f) > 0 {
		return f[0]
	}
	return def
}

func (a attrs) int(t tag.Tag, def int) int {
	if f := a.floats(t); len(f) > 0 {
		return int(f[0])
	}
	return def
}
