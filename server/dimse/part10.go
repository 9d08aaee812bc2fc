package dimse

import (
	"encoding/binary"
	"fmt"
	"strings"

	"github.com/midsag/midsag"
)

// part10Prefix is the 128-byte preamble and "DICM" (PS3.10 7.1).
const part10Prefix = 128 + 4

// metaHeader returns the preamble, "DICM" and the File Meta Information
// group in Explicit VR Little Endian (PS3.10 7.1).
func metaHeader(sopClass, sopInstance, transferSyntax, callingAE string, extra int) []byte {
	var g []byte
	el := func(elem uint16, vr string, v []byte) {
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
	uid := func(s string) []byte {
		if len(s)%2 == 1 {
			return append([]byte(s), 0)
		}
		return []byte(s)
	}
	text := func(s string) []byte {
		if len(s)%2 == 1 {
			return append([]byte(s), ' ')
		}
		return []byte(s)
	}
	el(0x0001, "OB", []byte{0, 1}) // File Meta Information Version 00\01
	el(0x0002, "UI", uid(sopClass))
	el(0x0003, "UI", uid(sopInstance))
	el(0x0010, "UI", uid(transferSyntax))
	el(0x0012, "UI", uid(midsag.ImplementationClassUID))
	el(0x0013, "SH", text(midsag.ImplementationVersionName))
	if callingAE != "" {
		el(0x0016, "AE", text(callingAE))
	}
	b := make([]byte, part10Prefix, part10Prefix+12+len(g)+extra)
	copy(b[128:], "DICM")
	b = binary.LittleEndian.AppendUint16(b, 0x0002)
	b = binary.LittleEndian.AppendUint16(b, 0x0000)
	b = append(b, "UL"...)
	b = binary.LittleEndian.AppendUint16(b, 4)
	b = binary.LittleEndian.AppendUint32(b, uint32(len(g)))
	return append(b, g...)
}

// Part10 wraps a dataset received over the network into a DICOM Part 10
// file: preamble, "DICM" and File Meta Information (PS3.10 7.1) naming
// the SOP class and instance, the transfer syntax the dataset is encoded
// in, midsag's implementation class and version, and callingAE as the
// Source Application Entity Title (omitted when empty).
func Part10(sopClass, sopInstance, transferSyntax, callingAE string, dataset []byte) []byte {
	return append(metaHeader(sopClass, sopInstance, transferSyntax, callingAE, len(dataset)), dataset...)
}

// fileMeta is what the SCU needs from a Part 10 file.
type fileMeta struct {
	sopClass, sopInstance, transferSyntax string
	dataset                               []byte
}

// parsePart10 reads the File Meta Information of a Part 10 file (PS3.10
// 7.1): Explicit VR Little Endian group 0002 elements after the preamble
// and "DICM", up to the first element of another group.
func parsePart10(b []byte) (fileMeta, error) {
	var m fileMeta
	if len(b) < part10Prefix || string(b[128:132]) != "DICM" {
		return m, fmt.Errorf("not a DICOM Part 10 file: no DICM prefix")
	}
	p := b[part10Prefix:]
	off := part10Prefix
	for len(p) >= 8 && binary.LittleEndian.Uint16(p) == 0x0002 {
		elem := binary.LittleEndian.Uint16(p[2:])
		vr := string(p[4:6])
		var n, hl int
		switch vr {
		case "OB", "OW", "OF", "SQ", "UT", "UN":
			if len(p) < 12 {
				return m, fmt.Errorf("file meta: truncated element (0002,%04X)", elem)
			}
			n, hl = int(binary.LittleEndian.Uint32(p[8:])), 12
		default:
			n, hl = int(binary.LittleEndian.Uint16(p[6:])), 8
		}
		if n < 0 || n > len(p)-hl {
			return m, fmt.Errorf("file meta: element (0002,%04X) length %d exceeds the file", elem, n)
		}
		v := strings.TrimRight(string(p[hl:hl+n]), "\x00 ")
		switch elem {
		case 0x0002:
			m.sopClass = v
		case 0x0003:
			m.sopInstance = v
		case 0x0010:
			m.transferSyntax = v
		}
		p = p[hl+n:]
		off += hl + n
	}
	if m.sopClass == "" || m.sopInstance == "" || m.transferSyntax == "" {
		return m, fmt.Errorf("file meta: missing Media Storage SOP Class/Instance UID or Transfer Syntax UID")
	}
	m.dataset = b[off:]
	return m, nil
}
