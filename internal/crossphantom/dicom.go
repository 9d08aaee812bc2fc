package crossphantom

import (
	"encoding/binary"
	"fmt"
	"math/big"
	"math/rand/v2"
	"slices"
	"strconv"
	"strings"

	"github.com/midsag/midsag"
	"github.com/midsag/midsag/part10"
)

// element is one data element before encoding.
type element struct {
	tag   uint32 // group<<16 | element
	vr    string
	value []byte
}

// dataset collects elements in any order and encodes them in ascending
// tag order, as PS3.5 7.1 requires.
type dataset struct{ els []element }

// text adds a string element, padded to even length: UI with NUL, other
// text VRs with a space (PS3.5 6.2).
func (d *dataset) text(tag uint32, vr, v string) {
	if len(v)%2 == 1 {
		if vr == "UI" {
			v += "\x00"
		} else {
			v += " "
		}
	}
	d.els = append(d.els, element{tag, vr, []byte(v)})
}

// us adds an unsigned short (US) element.
func (d *dataset) us(tag uint32, v uint16) {
	d.els = append(d.els, element{tag, "US", binary.LittleEndian.AppendUint16(nil, v)})
}

// ds adds a Decimal String with one or more values (PS3.5 6.2: at most 16
// characters each).
func (d *dataset) ds(tag uint32, vs ...float64) {
	parts := make([]string, len(vs))
	for i, v := range vs {
		parts[i] = formatDS(v)
	}
	d.text(tag, "DS", strings.Join(parts, `\`))
}

// is adds an Integer String.
func (d *dataset) is(tag uint32, v int) { d.text(tag, "IS", strconv.Itoa(v)) }

// ow adds 16-bit pixel data (OW, PS3.5 8.1.1).
func (d *dataset) ow(tag uint32, px []uint16) {
	b := make([]byte, 2*len(px))
	for i, v := range px {
		binary.LittleEndian.PutUint16(b[2*i:], v)
	}
	d.els = append(d.els, element{tag, "OW", b})
}

// longVR reports the VRs with a 2-byte reserved field and 32-bit length
// in Explicit VR encoding (PS3.5 7.1.2, Table 7.1-1).
func longVR(vr string) bool {
	switch vr {
	case "OB", "OD", "OF", "OL", "OV", "OW", "SQ", "SV", "UC", "UN", "UR", "UT", "UV":
		return true
	}
	return false
}

// encode returns the dataset in Explicit VR Little Endian (PS3.5 A.2).
func (d *dataset) encode() []byte {
	slices.SortStableFunc(d.els, func(a, b element) int {
		switch {
		case a.tag < b.tag:
			return -1
		case a.tag > b.tag:
			return 1
		}
		return 0
	})
	n := 0
	for _, e := range d.els {
		n += 12 + len(e.value)
	}
	out := make([]byte, 0, n)
	for _, e := range d.els {
		out = binary.LittleEndian.AppendUint16(out, uint16(e.tag>>16))
		out = binary.LittleEndian.AppendUint16(out, uint16(e.tag))
		out = append(out, e.vr...)
		if longVR(e.vr) {
			out = append(out, 0, 0)
			out = binary.LittleEndian.AppendUint32(out, uint32(len(e.value)))
		} else {
			out = binary.LittleEndian.AppendUint16(out, uint16(len(e.value)))
		}
		out = append(out, e.value...)
	}
	return out
}

// formatDS writes v in at most 16 characters (PS3.5 6.2, DS).
func formatDS(v float64) string {
	for prec := 6; prec >= 0; prec-- {
		s := strconv.FormatFloat(v, 'f', prec, 64)
		if strings.Contains(s, ".") {
			s = strings.TrimRight(strings.TrimRight(s, "0"), ".")
		}
		if s == "-0" {
			s = "0"
		}
		if len(s) <= 16 {
			return s
		}
	}
	return strconv.FormatFloat(v, 'e', 8, 64)
}

// newUID returns a UUID-derived UID under the 2.25 root (PS3.5 B.2),
// drawn from r so studies are reproducible.
func newUID(r *rand.Rand) string {
	v := new(big.Int).SetUint64(r.Uint64())
	v.Lsh(v, 64)
	v.Or(v, new(big.Int).SetUint64(r.Uint64()))
	return "2.25." + v.String()
}

// wrap frames an MR Image Storage dataset as a Part 10 file (PS3.10 7.1).
func wrap(sopUID string, ds []byte) []byte {
	return part10.Wrap(part10.Meta{
		SOPClassUID:       midsag.MRImageStorage,
		SOPInstanceUID:    sopUID,
		TransferSyntaxUID: midsag.ExplicitVRLittleEndian,
	}, ds)
}

// tag makes a tag from its group and element numbers.
func tag(g, e uint16) uint32 { return uint32(g)<<16 | uint32(e) }

// mrHeader is what every instance of one study shares.
type mrHeader struct {
	studyUID, forUID       string
	patientName, patientID string
	birth, sex             string
	date, time             string
	accession, studyID     string
	age                    string
	weight                 float64
	field                  float64
}

// protocol is one series' acquisition parameters and descriptive text.
type protocol struct {
	seriesUID   string
	number      int
	description string
	seqName     string
	tr, te      float64
	etl         int
	flip        float64
	averages    float64
	bandwidth   float64
	acquired    int  // Images in Acquisition (0020,1002)
	writeAcq    bool // whether to write it
	reverse     bool // Instance Number ascending against the normal
}

// mrInstance encodes slice i of a series as a Part 10 MR Image Storage
// file: Patient, General Study, General Series, Frame of Reference,
// General Equipment, General Image, Image Plane, Image Pixel, MR Image and
// SOP Common modules (PS3.3 A.4).
func mrInstance(h *mrHeader, p *protocol, s *series, i, instance int, sopUID string, px []uint16) []byte {
	var d dataset
	d.text(tag(0x0008, 0x0005), "CS", "ISO_IR 100")
	d.text(tag(0x0008, 0x0008), "CS", `ORIGINAL\PRIMARY\M\ND`)
	d.text(tag(0x0008, 0x0016), "UI", midsag.MRImageStorage)
	d.text(tag(0x0008, 0x0018), "UI", sopUID)
	d.text(tag(0x0008, 0x0020), "DA", h.date)
	d.text(tag(0x0008, 0x0021), "DA", h.date)
	d.text(tag(0x0008, 0x0023), "DA", h.date)
	d.text(tag(0x0008, 0x0030), "TM", h.time)
	d.text(tag(0x0008, 0x0031), "TM", h.time)
	d.text(tag(0x0008, 0x0033), "TM", h.time)
	d.text(tag(0x0008, 0x0050), "SH", h.accession)
	d.text(tag(0x0008, 0x0060), "CS", "MR")
	d.text(tag(0x0008, 0x0070), "LO", "Crossfield Imaging Phantom Works")
	d.text(tag(0x0008, 0x0090), "PN", "")
	d.text(tag(0x0008, 0x1030), "LO", "C-SPINE SCREENING")
	d.text(tag(0x0008, 0x103E), "LO", p.description)
	d.text(tag(0x0008, 0x1090), "LO", "XPH-1")
	d.text(tag(0x0010, 0x0010), "PN", h.patientName)
	d.text(tag(0x0010, 0x0020), "LO", h.patientID)
	d.text(tag(0x0010, 0x0030), "DA", h.birth)
	d.text(tag(0x0010, 0x0040), "CS", h.sex)
	d.text(tag(0x0010, 0x1010), "AS", h.age)
	d.ds(tag(0x0010, 0x1030), h.weight)
	d.text(tag(0x0018, 0x0015), "CS", "CSPINE")
	if p.tr > 1500 {
		d.text(tag(0x0018, 0x0020), "CS", "SE")
		d.text(tag(0x0018, 0x0021), "CS", `SK\SP`)
	} else {
		d.text(tag(0x0018, 0x0020), "CS", "SE")
		d.text(tag(0x0018, 0x0021), "CS", "SP")
	}
	d.text(tag(0x0018, 0x0022), "CS", "")
	d.text(tag(0x0018, 0x0023), "CS", "2D")
	d.text(tag(0x0018, 0x0024), "SH", p.seqName)
	d.text(tag(0x0018, 0x0025), "CS", "N")
	d.ds(tag(0x0018, 0x0050), s.thickness)
	d.ds(tag(0x0018, 0x0080), p.tr)
	d.ds(tag(0x0018, 0x0081), p.te)
	d.ds(tag(0x0018, 0x0083), p.averages)
	d.text(tag(0x0018, 0x0085), "SH", "1H")
	d.ds(tag(0x0018, 0x0084), h.field*42.577478)
	d.ds(tag(0x0018, 0x0087), h.field)
	d.ds(tag(0x0018, 0x0088), s.thickness+s.gap)
	d.is(tag(0x0018, 0x0091), p.etl)
	d.ds(tag(0x0018, 0x0095), p.bandwidth)
	d.text(tag(0x0018, 0x1030), "LO", p.description)
	d.ds(tag(0x0018, 0x1314), p.flip)
	d.text(tag(0x0018, 0x5100), "CS", "HFS")
	d.text(tag(0x0020, 0x000D), "UI", h.studyUID)
	d.text(tag(0x0020, 0x000E), "UI", p.seriesUID)
	d.text(tag(0x0020, 0x0010), "SH", h.studyID)
	d.is(tag(0x0020, 0x0011), p.number)
	d.is(tag(0x0020, 0x0012), 1)
	d.is(tag(0x0020, 0x0013), instance)
	pos := s.positions[i]
	d.ds(tag(0x0020, 0x0032), pos[0], pos[1], pos[2])
	d.ds(tag(0x0020, 0x0037), s.row[0], s.row[1], s.row[2], s.col[0], s.col[1], s.col[2])
	d.text(tag(0x0020, 0x0052), "UI", h.forUID)
	if p.writeAcq {
		d.is(tag(0x0020, 0x1002), p.acquired)
	}
	d.text(tag(0x0020, 0x1040), "LO", "")
	d.ds(tag(0x0020, 0x1041), pos.dot(s.normal))
	d.us(tag(0x0028, 0x0002), 1)
	d.text(tag(0x0028, 0x0004), "CS", "MONOCHROME2")
	d.us(tag(0x0028, 0x0010), uint16(s.rows))
	d.us(tag(0x0028, 0x0011), uint16(s.cols))
	d.ds(tag(0x0028, 0x0030), s.spacing, s.spacing)
	d.us(tag(0x0028, 0x0100), 16)
	d.us(tag(0x0028, 0x0101), 12)
	d.us(tag(0x0028, 0x0102), 11)
	d.us(tag(0x0028, 0x0103), 0)
	w := s.gain * 0.9
	d.ds(tag(0x0028, 0x1050), w/2)
	d.ds(tag(0x0028, 0x1051), w)
	d.ow(tag(0x7FE0, 0x0010), px)
	return wrap(sopUID, d.encode())
}

// fileName is a file's path in a study: one folder per series, names
// that say nothing about position.
func fileName(seriesNumber int, r *rand.Rand) string {
	return fmt.Sprintf("S%02d/%08X.dcm", seriesNumber, r.Uint32())
}
