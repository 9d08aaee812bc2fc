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
	"github.com/midsag/midsag/part10"
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

// readMeta reads the File Meta Information starting at off through
// part10.ReadMeta, which refuses a group cut short as truncated.
func readMeta(data []byte, off int) (meta, error) {
	m, n, err := part10.ReadMeta(data[off:])
	if err != nil {
		return meta{bodyOffset: off}, err
	}
	return meta{transferSyntax: m.TransferSyntaxUID, bodyOffset: off + n}, nil
}

// framing reads how a stream is framed (PS3.10 7.1): the File Meta
// Information through part10 after the preamble and "DICM", or, when
// lenient, a bare group 0002 or a bare data set whose syntax is guessed
// (PS3.5 10.1 makes Implicit VR Little Endian the default; a VR after the
// first tag shows explicit VR). Bytes that are not DICOM are refused as
// not_dicom, a meta group cut short as truncated.
func framing(data []byte, lenient bool) (meta, error) {
	var (
		m   meta
		err error
	)
	switch {
	case len(data) >= 132 && string(data[128:132]) == "DICM":
		m, err = readMeta(data, 132)
	case !lenient:
		return m, midsag.Rejectf(midsag.ReasonNotDICOM, "%s", sniff(data))
	case len(data) >= 8 && binary.LittleEndian.Uint16(data) == 0x0002:
		m, err = readMeta(data, 0)
	case len(data) < 8 || binary.LittleEndian.Uint16(data) > 0x0028:
		return m, midsag.Rejectf(midsag.ReasonNotDICOM, "%s, and the data does not start like a data set", sniff(data))
	case isUpper(data[4]) && isUpper(data[5]):
		m.transferSyntax = midsag.ExplicitVRLittleEndian
	}
	if err != nil {
		return m, err
	}
	if m.transferSyntax == "" {
		m.transferSyntax = midsag.ImplicitVRLittleEndian
	}
	return m, nil
}

func (p *Preprocessor) parse(data []byte) (inst *midsag.Instance, err error) {
	m, err := framing(data, p.opts.Lenient)
	if err != nil {
		return nil, err
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
	ds, err := parseDataset(body, datasetSyntax(m.transferSyntax))
	if err != nil {
		return nil, err
	}
	inst, err = p.instance(ds)
	if err != nil {
		return nil, err
	}
	inst.TransferSyntaxUID = m.transferSyntax
	if len(inst.Fragments) > 0 {
		inst.FrameOffsets = offsetTable(ds, body, !implicit)
	}
	return inst, nil
}

// datasetSyntax is the syntax the data set itself is encoded in. Every
// transfer syntax other than the two uncompressed alternatives encodes
// the data set in Explicit VR Little Endian (PS3.5 10.1, A.4), and the
// deflated data set has been inflated before parsing; the parser is given
// that syntax, so it never meets a UID it does not know (such as Deflated
// Image Frame Compression, PS3.5 A.4.13), on which it would fail.
func datasetSyntax(ts string) string {
	switch ts {
	case midsag.ImplicitVRLittleEndian, midsag.ExplicitVRBigEndian:
		return ts
	}
	return midsag.ExplicitVRLittleEndian
}

// parseDataset runs the DICOM parser over a data set body, converting a
// panic inside it into a refusal. The body is preceded by a file meta
// information group naming its transfer syntax (PS3.10 7.1, written by
// part10.Header): without one the parser guesses the syntax by trial
// parses, which is slow and allocates.
func parseDataset(body []byte, ts string) (ds dicom.Dataset, err error) {
	defer func() {
		// The panic value is Go runtime text, never shown to a person:
		// the refusal is a fixed sentence.
		if recover() != nil {
			err = midsag.Rejectf(midsag.ReasonNotDICOM, "the DICOM parser could not read this file's data set")
		}
	}()
	// Only the transfer syntax matters to the parser; part10 fills in
	// midsag's implementation UIDs.
	head := part10.Header(part10.Meta{TransferSyntaxUID: ts}, 0)
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
	if err := frameGroups(a, inst); err != nil {
		return nil, err
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
