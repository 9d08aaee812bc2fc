// Package part10 frames DICOM datasets as Part 10 files (PS3.10 7.1): the
// 128-byte preamble, "DICM" and the File Meta Information group in
// Explicit VR Little Endian, and reads that group back. The service's
// DICOM listener, the phantom generator and the Secondary Capture writer
// all frame their files here.
package part10

import (
	"encoding/binary"
	"strings"

	"github.com/midsag/midsag"
)

// PrefixLen is the length of the preamble and "DICM".
const PrefixLen = 128 + 4

// Meta is the File Meta Information midsag writes and reads.
type Meta struct {
	// SOPClassUID and SOPInstanceUID are the Media Storage SOP Class and
	// Instance UIDs (0002,0002) and (0002,0003).
	SOPClassUID, SOPInstanceUID string
	// TransferSyntaxUID (0002,0010) is the syntax the dataset is in.
	TransferSyntaxUID string
	// ImplementationClassUID (0002,0012) and ImplementationVersionName
	// (0002,0013); empty means midsag's own.
	ImplementationClassUID, ImplementationVersionName string
	// SourceAETitle (0002,0016) is the AE that sent the dataset; omitted
	// when empty.
	SourceAETitle string
}

// Header returns the preamble, "DICM" and m's File Meta Information
// group, with room for extra more bytes so the dataset can be appended
// without a copy.
func Header(m Meta, extra int) []byte {
	if m.ImplementationClassUID == "" {
		m.ImplementationClassUID = midsag.ImplementationClassUID
	}
	if m.ImplementationVersionName == "" {
		m.ImplementationVersionName = midsag.ImplementationVersionName
	}
	var g []byte
	el := func(elem uint16, vr, v string, pad byte) {
		if len(v)%2 == 1 {
			v += string(pad) // PS3.5 6.2: UI pads with NUL, text with a space
		}
		g = binary.LittleEndian.AppendUint16(g, 0x0002)
		g = binary.LittleEndian.AppendUint16(g, elem)
		g = append(g, vr...)
		if vr == "OB" {
			// OB has 2 reserved bytes and a 32-bit length (PS3.5 7.1.2).
			g = append(g, 0, 0)
			g = binary.LittleEndian.AppendUint32(g, uint32(len(v)))
		} else {
			g = binary.LittleEndian.AppendUint16(g, uint16(len(v)))
		}
		g = append(g, v...)
	}
	el(0x0001, "OB", "\x00\x01", 0) // File Meta Information Version 00\01
	el(0x0002, "UI", m.SOPClassUID, 0)
	el(0x0003, "UI", m.SOPInstanceUID, 0)
	el(0x0010, "UI", m.TransferSyntaxUID, 0)
	el(0x0012, "UI", m.ImplementationClassUID, 0)
	el(0x0013, "SH", m.ImplementationVersionName, ' ')
	if m.SourceAETitle != "" {
		el(0x0016, "AE", m.SourceAETitle, ' ')
	}
	b := make([]byte, PrefixLen, PrefixLen+12+len(g)+extra)
	copy(b[128:], "DICM")
	// File Meta Information Group Length (0002,0000), PS3.10 7.1.
	b = binary.LittleEndian.AppendUint16(b, 0x0002)
	b = binary.LittleEndian.AppendUint16(b, 0x0000)
	b = append(b, "UL"...)
	b = binary.LittleEndian.AppendUint16(b, 4)
	b = binary.LittleEndian.AppendUint32(b, uint32(len(g)))
	return append(b, g...)
}

// Wrap returns dataset, encoded in m.TransferSyntaxUID, as a Part 10 file.
func Wrap(m Meta, dataset []byte) []byte {
	return append(Header(m, len(dataset)), dataset...)
}

// LongVR reports whether an explicit VR has a 2-byte reserved field and a
// 4-byte value length (PS3.5 7.1.2, Table 7.1-1); the others have a
// 2-byte length.
func LongVR(vr string) bool { return longVR[vr] }

var longVR = map[string]bool{"OB": true, "OD": true, "OF": true, "OL": true, "OV": true,
	"OW": true, "SQ": true, "SV": true, "UC": true, "UN": true, "UR": true, "UT": true, "UV": true}

// ReadMeta reads the File Meta Information elements at the start of b:
// group 0002, always Explicit VR Little Endian (PS3.10 7.1), up to the
// first element of another group. It returns them with the number of
// bytes they take. A group cut short is a midsag.ReasonTruncated refusal;
// no element is required (Parse checks what a Part 10 file must hold).
func ReadMeta(b []byte) (Meta, int, error) {
	var m Meta
	off := 0
	for off+8 <= len(b) && binary.LittleEndian.Uint16(b[off:]) == 0x0002 {
		elem := binary.LittleEndian.Uint16(b[off+2:])
		var n, hl int
		if LongVR(string(b[off+4 : off+6])) {
			if off+12 > len(b) {
				return m, 0, midsag.Rejectf(midsag.ReasonTruncated, "file meta information is cut short")
			}
			n, hl = int(binary.LittleEndian.Uint32(b[off+8:])), 12
		} else {
			n, hl = int(binary.LittleEndian.Uint16(b[off+6:])), 8
		}
		if n < 0 || n > len(b)-off-hl {
			return m, 0, midsag.Rejectf(midsag.ReasonTruncated, "file meta element (0002,%04X) runs past the end", elem)
		}
		m.set(elem, strings.TrimRight(string(b[off+hl:off+hl+n]), "\x00 "))
		off += hl + n
	}
	if rest := b[off:]; len(rest) >= 2 && len(rest) < 8 && binary.LittleEndian.Uint16(rest) == 0x0002 {
		return m, 0, midsag.Rejectf(midsag.ReasonTruncated, "file meta information is cut short")
	}
	return m, off, nil
}

// set stores the value of File Meta element (0002,elem), if midsag
// keeps it (PS3.10 Table 7.1-1).
func (m *Meta) set(elem uint16, v string) {
	fields := map[uint16]*string{
		0x0002: &m.SOPClassUID, 0x0003: &m.SOPInstanceUID, 0x0010: &m.TransferSyntaxUID,
		0x0012: &m.ImplementationClassUID, 0x0013: &m.ImplementationVersionName, 0x0016: &m.SourceAETitle,
	}
	if f := fields[elem]; f != nil {
		*f = v
	}
}

// Parse reads the File Meta Information of a Part 10 file (ReadMeta)
// after the preamble and "DICM"; the first element of another group
// starts the returned dataset. The Media Storage SOP Class and Instance
// UIDs and the Transfer Syntax UID are required. Refusals are
// *midsag.Error: not_dicom without the prefix or the UIDs, truncated for
// a group cut short.
func Parse(b []byte) (Meta, []byte, error) {
	if len(b) < PrefixLen || string(b[128:132]) != "DICM" {
		return Meta{}, nil, midsag.Rejectf(midsag.ReasonNotDICOM, "not a DICOM Part 10 file: no DICM prefix (PS3.10 7.1)")
	}
	m, n, err := ReadMeta(b[PrefixLen:])
	if err != nil {
		return m, nil, err
	}
	if m.SOPClassUID == "" || m.SOPInstanceUID == "" || m.TransferSyntaxUID == "" {
		return m, nil, midsag.Rejectf(midsag.ReasonNotDICOM, "file meta: missing Media Storage SOP Class/Instance UID or Transfer Syntax UID")
	}
	return m, b[PrefixLen+n:], nil
}
