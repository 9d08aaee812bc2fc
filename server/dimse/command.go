package dimse

import (
	"encoding/binary"
	"fmt"
	"strings"
)

// Command Field values (PS3.7 Annex E and the service chapters).
const (
	cmdCStoreRQ  = 0x0001
	cmdCStoreRSP = 0x8001
	cmdCEchoRQ   = 0x0030
	cmdCEchoRSP  = 0x8030
	cmdCCancelRQ = 0x0FFF
)

// requestsWithResponse are the DIMSE requests of PS3.7 Annex E that
// have a response; we answer those we do not serve with 0x0211.
var requestsWithResponse = map[uint16]bool{
	0x0010: true, // C-GET-RQ
	0x0020: true, // C-FIND-RQ
	0x0021: true, // C-MOVE-RQ
	0x0100: true, // N-EVENT-REPORT-RQ
	0x0110: true, // N-GET-RQ
	0x0120: true, // N-SET-RQ
	0x0130: true, // N-ACTION-RQ
	0x0140: true, // N-CREATE-RQ
	0x0150: true, // N-DELETE-RQ
}

// DIMSE status codes used here (PS3.7 Annex C; storage statuses in
// PS3.4 B.2.3).
const (
	// StatusSuccess is 0000H, Success.
	StatusSuccess uint16 = 0x0000
	// StatusSOPClassNotSupported is 0122H, Refused: SOP Class not
	// supported (PS3.7 Annex C); the Client also reports it for files whose
	// presentation context the peer did not accept.
	StatusSOPClassNotSupported uint16 = 0x0122
	// StatusUnrecognizedOperation is 0211H (PS3.7 Annex C).
	StatusUnrecognizedOperation uint16 = 0x0211
	// StatusOutOfResources is A700H, Refused: Out of Resources (PS3.4
	// B.2.3).
	StatusOutOfResources uint16 = 0xA700
	// StatusDataSetMismatch is A900H, Error: Data Set does not match SOP
	// Class (PS3.4 B.2.3).
	StatusDataSetMismatch uint16 = 0xA900
	// StatusCannotUnderstand is C000H, Error: Cannot understand (PS3.4
	// B.2.3).
	StatusCannotUnderstand uint16 = 0xC000
)

// noDataSet is the Command Data Set Type meaning no dataset follows
// (PS3.7 E.1); any other value means one does.
const noDataSet = 0x0101

// verificationSOPClass is the Verification SOP Class (PS3.4 A.4).
const verificationSOPClass = "1.2.840.10008.1.1"

// maxCommandBytes bounds a reassembled command set; real ones are a few
// hundred bytes (our choice).
const maxCommandBytes = 16 << 10

// command holds the group 0000 elements midsag uses (PS3.7 E.1).
type command struct {
	sopClass      string // (0000,0002) Affected SOP Class UID
	field         uint16 // (0000,0100) Command Field
	messageID     uint16 // (0000,0110) Message ID
	respondingTo  uint16 // (0000,0120) Message ID Being Responded To
	priority      uint16 // (0000,0700) Priority
	dataSetType   uint16 // (0000,0800) Command Data Set Type
	status        uint16 // (0000,0900) Status
	sopInstance   string // (0000,1000) Affected SOP Instance UID
	errorComment  string // (0000,0902) Error Comment, responses only
	hasMessageID  bool
	hasRespondsTo bool
}

// hasDataSet reports whether a dataset follows the command.
func (c *command) hasDataSet() bool { return c.dataSetType != noDataSet }

// parseCommand decodes a command set in Implicit VR Little Endian
// (PS3.7 6.3.1, PS3.5 A.1).
func parseCommand(b []byte) (*command, error) {
	c := &command{dataSetType: noDataSet}
	seen := false
	for len(b) > 0 {
		if len(b) < 8 {
			return nil, fmt.Errorf("command set: truncated element header")
		}
		group, elem := binary.LittleEndian.Uint16(b), binary.LittleEndian.Uint16(b[2:])
		n := binary.LittleEndian.Uint32(b[4:])
		if uint64(n) > uint64(len(b)-8) {
			return nil, fmt.Errorf("command set: element (%04X,%04X) length %d exceeds the %d bytes left", group, elem, n, len(b)-8)
		}
		v := b[8 : 8+n]
		b = b[8+n:]
		if group != 0x0000 {
			return nil, fmt.Errorf("command set: element (%04X,%04X) outside group 0000", group, elem)
		}
		us := func() (uint16, error) {
			if len(v) != 2 {
				return 0, fmt.Errorf("command set: US element (0000,%04X) of %d bytes", elem, len(v))
			}
			return binary.LittleEndian.Uint16(v), nil
		}
		var err error
		switch elem {
		case 0x0002:
			c.sopClass = trimUID(v)
		case 0x0100:
			c.field, err = us()
			seen = err == nil
		case 0x0110:
			c.messageID, err = us()
			c.hasMessageID = true
		case 0x0120:
			c.respondingTo, err = us()
			c.hasRespondsTo = true
		case 0x0700:
			c.priority, err = us()
		case 0x0800:
			c.dataSetType, err = us()
		case 0x0900:
			c.status, err = us()
		case 0x1000:
			c.sopInstance = trimUID(v)
		}
		if err != nil {
			return nil, err
		}
	}
	if !seen {
		return nil, fmt.Errorf("command set: no Command Field (0000,0100)")
	}
	return c, nil
}

// cmdEncoder writes Implicit VR Little Endian group 0000 elements in
// ascending tag order (PS3.5 7.1).
type cmdEncoder []byte

func (e *cmdEncoder) elem(elem uint16, v []byte) {
	*e = binary.LittleEndian.AppendUint16(*e, 0)
	*e = binary.LittleEndian.AppendUint16(*e, elem)
	*e = binary.LittleEndian.AppendUint32(*e, uint32(len(v)))
	*e = append(*e, v...)
}

func (e *cmdEncoder) us(elem, v uint16) { e.elem(elem, binary.LittleEndian.AppendUint16(nil, v)) }

func (e *cmdEncoder) uid(elem uint16, s string) {
	b := []byte(s)
	if len(b)%2 == 1 {
		b = append(b, 0) // UI is padded with NUL to even length (PS3.5 6.2)
	}
	e.elem(elem, b)
}

// maxLO is the length of an LO value in characters (PS3.5 6.2).
const maxLO = 64

// lo writes an LO value (Error Comment, PS3.7 C.4): at most 64
// characters, backslashes (the value separator) replaced, padded with a
// space to even length (PS3.5 6.2).
func (e *cmdEncoder) lo(elem uint16, s string) {
	s = strings.ReplaceAll(s, `\`, "/")
	if r := []rune(s); len(r) > maxLO {
		s = string(r[:maxLO])
	}
	b := []byte(s)
	if len(b)%2 == 1 {
		b = append(b, ' ')
	}
	e.elem(elem, b)
}

// encode returns the command set with its (0000,0000) Command Group
// Length first.
func (c *command) encode() []byte {
	var e cmdEncoder
	if c.sopClass != "" {
		e.uid(0x0002, c.sopClass)
	}
	e.us(0x0100, c.field)
	if c.field&0x8000 == 0 {
		e.us(0x0110, c.messageID)
	} else {
		e.us(0x0120, c.respondingTo)
	}
	if c.field == cmdCStoreRQ {
		e.us(0x0700, c.priority)
	}
	e.us(0x0800, c.dataSetType)
	if c.field&0x8000 != 0 {
		e.us(0x0900, c.status)
		if c.errorComment != "" && c.status != StatusSuccess {
			e.lo(0x0902, c.errorComment)
		}
	}
	if c.sopInstance != "" {
		e.uid(0x1000, c.sopInstance)
	}
	var out cmdEncoder
	out.elem(0x0000, binary.LittleEndian.AppendUint32(nil, uint32(len(e))))
	return append(out, e...)
}
