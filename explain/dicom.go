package explain

import (
	"bytes"
	"encoding/binary"
	"errors"
	"fmt"
	"sort"
	"strconv"
	"time"

	"github.com/midsag/midsag"
	"github.com/midsag/midsag/part10"
)

// Defaults of SCOptions.
const (
	DefaultSeriesNumber      = 9901
	DefaultSeriesDescription = "MIDSAG OCCLUSION MAP (RESEARCH)"
)

// SCOptions name the new series and instance of a Secondary Capture.
// Zero fields take defaults: DefaultSeriesNumber, DefaultSeriesDescription,
// new UIDs under midsag.OutputUIDRoot (so the listener knows the map as
// midsag's own if a PACS sends it back) and now.
type SCOptions struct {
	SeriesNumber      int
	SeriesDescription string
	SeriesInstanceUID string
	SOPInstanceUID    string
	Now               time.Time
}

// SecondaryCapture returns Picture as a DICOM Part 10 Secondary Capture
// image (PS3.3 A.8.1; RGB, Explicit VR Little Endian) in the result's
// study and a new series, with the notice in Image Comments (0020,4000)
// and the stacked source images in Source Image Sequence (0008,2112).
// The Patient and General Study attributes are copied from the centre
// source image (PS3.3 C.7.1.1, C.7.2.1), so a PACS files the map with the
// study it came from.
func SecondaryCapture(res *midsag.Result, o SCOptions) ([]byte, error) {
	img, err := Picture(res)
	if err != nil {
		return nil, err
	}
	if res.StudyInstanceUID == "" {
		return nil, errors.New("explain: the result has no Study Instance UID")
	}
	if o.SeriesNumber == 0 {
		o.SeriesNumber = DefaultSeriesNumber
	}
	if o.SeriesDescription == "" {
		o.SeriesDescription = DefaultSeriesDescription
	}
	if o.SeriesInstanceUID == "" {
		o.SeriesInstanceUID = midsag.NewOutputUID()
	}
	if o.SOPInstanceUID == "" {
		o.SOPInstanceUID = midsag.NewOutputUID()
	}
	if o.Now.IsZero() {
		o.Now = time.Now()
	}
	w, h := img.Bounds().Dx(), img.Bounds().Dy()
	pix := make([]byte, 0, w*h*3+1)
	for y := 0; y < h; y++ {
		for x := 0; x < w; x++ {
			c := img.RGBAAt(x, y)
			pix = append(pix, c.R, c.G, c.B)
		}
	}
	e := res.Explanation
	pt := e.Picture.Patient
	var items [][]element
	for _, s := range e.Picture.Sources {
		item := []element{
			str(0x00081150, "UI", s.SOPClassUID),
			str(0x00081155, "UI", s.SOPInstanceUID),
		}
		if s.FrameNumber > 0 {
			// Referenced Frame Number names the frame of a multi-frame
			// source (PS3.3 Table 10-3, Image SOP Instance Reference Macro).
			item = append(item, str(0x00081160, "IS", strconv.Itoa(s.FrameNumber)))
		}
		items = append(items, item)
	}
	date, tm := o.Now.Format("20060102"), o.Now.Format("150405")
	ds := []element{
		str(0x00080005, "CS", "ISO_IR 192"),
		str(0x00080008, "CS", `DERIVED\SECONDARY`),
		str(0x00080012, "DA", date),
		str(0x00080013, "TM", tm),
		str(0x00080016, "UI", midsag.SecondaryCaptureImageStorage),
		str(0x00080018, "UI", o.SOPInstanceUID),
		str(0x00080020, "DA", pt.StudyDate),
		str(0x00080030, "TM", pt.StudyTime),
		str(0x00080050, "SH", pt.AccessionNumber),
		str(0x00080060, "CS", "OT"),
		str(0x00080064, "CS", "WSD"),
		str(0x00080070, "LO", "midsag"),
		str(0x00080090, "PN", pt.ReferringPhysicianName),
		str(0x0008103E, "LO", o.SeriesDescription),
		str(0x00082111, "ST", fmt.Sprintf("Occlusion sensitivity map (Zeiler and Fergus 2014), %s baseline, patch %d px, stride %d px, model %s %s",
			e.Baseline, e.PatchPX, e.StridePX, res.Model.Name, res.Model.Version)),
		{tag: 0x00082112, vr: "SQ", items: items},
		str(0x00100010, "PN", pt.PatientName),
		str(0x00100020, "LO", pt.PatientID),
		str(0x00100030, "DA", pt.PatientBirthDate),
		str(0x00100040, "CS", pt.PatientSex),
		str(0x00181012, "DA", date),
		str(0x00181016, "LO", "midsag"),
		str(0x0020000D, "UI", res.StudyInstanceUID),
		str(0x0020000E, "UI", o.SeriesInstanceUID),
		str(0x00200010, "SH", pt.StudyID),
		str(0x00200011, "IS", strconv.Itoa(o.SeriesNumber)),
		str(0x00200013, "IS", "1"),
		str(0x00200020, "CS", ""),
		// Laterality is type 2C; dciodvfy asks for it, so it is sent empty.
		str(0x00200060, "CS", ""),
		str(0x00204000, "LT", midsag.Notice),
		u16(0x00280002, 3),
		str(0x00280004, "CS", "RGB"),
		u16(0x00280006, 0),
		u16(0x00280010, uint16(h)),
		u16(0x00280011, uint16(w)),
		u16(0x00280100, 8),
		u16(0x00280101, 8),
		u16(0x00280102, 7),
		u16(0x00280103, 0),
		str(0x00280301, "CS", "YES"),
		{tag: 0x7FE00010, vr: "OB", value: pix},
	}
	var body bytes.Buffer
	sort.Slice(ds, func(i, j int) bool { return ds[i].tag < ds[j].tag })
	for _, el := range ds {
		el.encode(&body)
	}
	meta := part10.Meta{SOPClassUID: midsag.SecondaryCaptureImageStorage, SOPInstanceUID: o.SOPInstanceUID,
		TransferSyntaxUID: midsag.ExplicitVRLittleEndian}
	return part10.Wrap(meta, body.Bytes()), nil
}

// element is one data element in Explicit VR Little Endian (PS3.5 7.1.2).
type element struct {
	tag   uint32
	vr    string
	value []byte
	items [][]element // for SQ
}

func str(tag uint32, vr, s string) element {
	b := []byte(s)
	if len(b)%2 == 1 {
		// UIDs pad with NUL, other strings with a space (PS3.5 6.2).
		pad := byte(' ')
		if vr == "UI" {
			pad = 0
		}
		b = append(b, pad)
	}
	return element{tag: tag, vr: vr, value: b}
}

func u16(tag uint32, v uint16) element {
	return element{tag: tag, vr: "US", value: binary.LittleEndian.AppendUint16(nil, v)}
}

// encode writes the element; sequences and items get explicit lengths.
func (e element) encode(b *bytes.Buffer) {
	le := binary.LittleEndian
	var hdr []byte
	hdr = le.AppendUint16(hdr, uint16(e.tag>>16))
	hdr = le.AppendUint16(hdr, uint16(e.tag))
	hdr = append(hdr, e.vr...)
	val := e.value
	if e.vr == "SQ" {
		var sq bytes.Buffer
		for _, it := range e.items {
			var ib bytes.Buffer
			for _, el := range it {
				el.encode(&ib)
			}
			// Item tag (FFFE,E000) with its length (PS3.5 7.5.1).
			sq.Write(le.AppendUint32(le.AppendUint16(le.AppendUint16(nil, 0xFFFE), 0xE000), uint32(ib.Len())))
			sq.Write(ib.Bytes())
		}
		val = sq.Bytes()
	}
	switch e.vr {
	case "OB", "OW", "SQ", "UN", "UT", "UC", "UR":
		// 2 reserved bytes and a 32-bit length (PS3.5 7.1.2, Table 7.1-1).
		if len(val)%2 == 1 {
			val = append(val, 0)
		}
		hdr = le.AppendUint32(append(hdr, 0, 0), uint32(len(val)))
	default:
		hdr = le.AppendUint16(hdr, uint16(len(val)))
	}
	b.Write(hdr)
	b.Write(val)
}
