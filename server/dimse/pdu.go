package dimse

import (
	"bufio"
	"encoding/binary"
	"errors"
	"fmt"
	"io"
	"net"
	"strings"
	"time"
)

// PDU types (PS3.8 9.3.1).
const (
	pduAssociateRQ = 0x01
	pduAssociateAC = 0x02
	pduAssociateRJ = 0x03
	pduDataTF      = 0x04
	pduReleaseRQ   = 0x05
	pduReleaseRP   = 0x06
	pduAbort       = 0x07
)

// Item types of A-ASSOCIATE-RQ/AC (PS3.8 9.3.2.1-9.3.3.3, PS3.7 D.3.3).
const (
	itemAppContext    = 0x10
	itemPresContextRQ = 0x20
	itemPresContextAC = 0x21
	itemAbstract      = 0x30
	itemTransfer      = 0x40
	itemUserInfo      = 0x50
	itemMaxLength     = 0x51
	itemImplClass     = 0x52
	itemAsyncWindow   = 0x53
	itemImplVersion   = 0x55
)

// Presentation context results (PS3.8 9.3.3.2).
const (
	pcAccepted             = 0
	pcAbstractNotSupported = 3
	pcTransferNotSupported = 4
)

// A-ASSOCIATE-RJ fields (PS3.8 9.3.4).
const (
	rjPermanent = 1
	rjTransient = 2

	rjSourceUser     = 1 // DICOM UL service-user
	rjSourceACSE     = 2 // DICOM UL service-provider (ACSE related function)
	rjSourcePresent  = 3 // DICOM UL service-provider (Presentation related function)
	rjAppContext     = 2 // source 1: application-context-name-not-supported
	rjCallingAE      = 3 // source 1: calling-AE-title-not-recognized
	rjCalledAE       = 7 // source 1: called-AE-title-not-recognized
	rjProtoVersion   = 2 // source 2: protocol-version-not-supported
	rjLocalLimit     = 2 // source 3: local-limit-exceeded
	rjTempCongestion = 1 // source 3: temporary-congestion
)

// A-ABORT fields (PS3.8 9.3.8).
const (
	abortSourceUser     = 0 // DICOM UL service-user (initiated abort)
	abortSourceProvider = 2 // DICOM UL service-provider (initiated abort)

	abortNotSpecified    = 0
	abortUnrecognizedPDU = 1
	abortUnexpectedPDU   = 2
	abortInvalidParam    = 6
)

// applicationContext is the DICOM Application Context Name (PS3.7 A.2.1).
const applicationContext = "1.2.840.10008.3.1.1.1"

// pduHeaderLen is the fixed PDU header: type, reserved, 32-bit big-endian
// length (PS3.8 9.3.1).
const pduHeaderLen = 6

// minAssocPDU bounds non-P-DATA PDUs independently of the negotiated
// maximum: an A-ASSOCIATE-RQ from storescu proposing its ~120 storage SOP
// classes with three transfer syntaxes each is about 20 KB, so 64 KiB
// leaves room without letting a peer make us allocate much (our choice).
const minAssocPDU = 64 << 10

// ErrAborted is returned when the peer sent A-ABORT.
var ErrAborted = errors.New("association aborted by peer")

// RejectError is an A-ASSOCIATE-RJ received from the peer (PS3.8 9.3.4).
type RejectError struct {
	Result, Source, Reason byte
}

// Error describes the rejection with the standard's words where known.
func (e *RejectError) Error() string {
	kind := "permanent"
	if e.Result == rjTransient {
		kind = "transient"
	}
	why := fmt.Sprintf("source %d reason %d", e.Source, e.Reason)
	switch {
	case e.Source == rjSourceUser && e.Reason == rjCallingAE:
		why = "calling-AE-title-not-recognized"
	case e.Source == rjSourceUser && e.Reason == rjCalledAE:
		why = "called-AE-title-not-recognized"
	case e.Source == rjSourceUser && e.Reason == rjAppContext:
		why = "application-context-name-not-supported"
	case e.Source == rjSourcePresent && e.Reason == rjLocalLimit:
		why = "local-limit-exceeded"
	case e.Source == rjSourcePresent && e.Reason == rjTempCongestion:
		why = "temporary-congestion"
	}
	return fmt.Sprintf("association rejected (%s): %s", kind, why)
}

// protocolError is a violation by the peer; the association ends with
// A-ABORT carrying reason.
type protocolError struct {
	reason byte
	msg    string
}

func (e *protocolError) Error() string { return e.msg }

func protoErr(reason byte, format string, a ...any) error {
	return &protocolError{reason: reason, msg: fmt.Sprintf(format, a...)}
}

// ulConn is one TCP connection carrying the upper layer protocol.
type ulConn struct {
	c   net.Conn
	r   *bufio.Reader
	buf []byte
	// hdr holds a P-DATA-TF header and PDV header so writePDV does not
	// allocate.
	hdr [pduHeaderLen + 6]byte
}

func newULConn(c net.Conn) *ulConn {
	return &ulConn{c: c, r: bufio.NewReaderSize(c, 64<<10)}
}

// readPDU reads one PDU whose variable field may be at most dataLimit
// bytes for P-DATA-TF and otherLimit for the others, checked before
// anything is allocated. The returned body is valid until the next call.
// A zero deadline waits forever.
func (u *ulConn) readPDU(deadline time.Time, dataLimit, otherLimit uint32) (byte, []byte, error) {
	if err := u.c.SetReadDeadline(deadline); err != nil {
		return 0, nil, fmt.Errorf("set read deadline: %w", err)
	}
	var h [pduHeaderLen]byte
	if _, err := io.ReadFull(u.r, h[:]); err != nil {
		return 0, nil, fmt.Errorf("read PDU header: %w", err)
	}
	typ, n := h[0], binary.BigEndian.Uint32(h[2:])
	if typ < pduAssociateRQ || typ > pduAbort {
		return 0, nil, protoErr(abortUnrecognizedPDU, "unrecognized PDU type 0x%02x", typ)
	}
	limit := otherLimit
	if typ == pduDataTF {
		limit = dataLimit
	}
	if n > limit {
		return 0, nil, protoErr(abortInvalidParam, "PDU type 0x%02x length %d exceeds maximum %d", typ, n, limit)
	}
	if uint32(cap(u.buf)) < n {
		u.buf = make([]byte, n)
	}
	body := u.buf[:n]
	if _, err := io.ReadFull(u.r, body); err != nil {
		return 0, nil, fmt.Errorf("read PDU type 0x%02x body of %d bytes: %w", typ, n, err)
	}
	return typ, body, nil
}

// writePDU writes one PDU in a single call so small PDUs leave in one
// segment.
func (u *ulConn) writePDU(deadline time.Time, typ byte, body []byte) error {
	if err := u.c.SetWriteDeadline(deadline); err != nil {
		return fmt.Errorf("set write deadline: %w", err)
	}
	b := make([]byte, pduHeaderLen, pduHeaderLen+len(body))
	b[0] = typ
	binary.BigEndian.PutUint32(b[2:], uint32(len(body)))
	b = append(b, body...)
	if _, err := u.c.Write(b); err != nil {
		return fmt.Errorf("write PDU type 0x%02x: %w", typ, err)
	}
	return nil
}

// writePDV writes one P-DATA-TF PDU holding one PDV (PS3.8 9.3.5, E.2)
// without copying data.
func (u *ulConn) writePDV(deadline time.Time, pcID byte, command, last bool, data []byte) error {
	if err := u.c.SetWriteDeadline(deadline); err != nil {
		return fmt.Errorf("set write deadline: %w", err)
	}
	h := u.hdr[:]
	h[0], h[1] = pduDataTF, 0
	binary.BigEndian.PutUint32(h[2:], uint32(len(data)+6))
	// PDV item: length covers context ID, control header and data.
	binary.BigEndian.PutUint32(h[6:], uint32(len(data)+2))
	h[10] = pcID
	// Message control header, PS3.8 E.2: bit 0 command, bit 1 last fragment.
	var mch byte
	if command {
		mch |= 1
	}
	if last {
		mch |= 2
	}
	h[11] = mch
	bufs := net.Buffers{h, data}
	if _, err := bufs.WriteTo(u.c); err != nil {
		return fmt.Errorf("write P-DATA-TF: %w", err)
	}
	return nil
}

// writeAbort sends A-ABORT (PS3.8 9.3.8); errors are ignored because the
// connection is being dropped anyway.
func (u *ulConn) writeAbort(source, reason byte) {
	_ = u.writePDU(time.Now().Add(2*time.Second), pduAbort, []byte{0, 0, source, reason})
}

// writeReject sends A-ASSOCIATE-RJ (PS3.8 9.3.4).
func (u *ulConn) writeReject(deadline time.Time, result, source, reason byte) error {
	return u.writePDU(deadline, pduAssociateRJ, []byte{0, result, source, reason})
}

// presContext is one presentation context of an A-ASSOCIATE-RQ or AC.
type presContext struct {
	id       byte
	result   byte // AC only
	abstract string
	syntaxes []string // RQ: proposed; AC: the one accepted
}

// assocPDU is the content of A-ASSOCIATE-RQ or AC (PS3.8 9.3.2, 9.3.3).
type assocPDU struct {
	protocolVersion uint16
	calledAE        string
	callingAE       string
	appContext      string
	contexts        []presContext
	maxLength       uint32
	implClass       string
	implVersion     string
	asyncWindow     bool
}

// trimUID removes the NUL padding of an even-length UID (PS3.5 9.1) and
// stray spaces some implementations leave.
func trimUID(b []byte) string { return strings.TrimRight(string(b), "\x00 ") }

// trimAE removes the space padding of a 16-byte AE title (PS3.5 6.2).
func trimAE(b []byte) string { return strings.Trim(string(b), " \x00") }

// padAE returns a 16-byte space-padded AE title field.
func padAE(s string) []byte {
	b := []byte("                ")
	copy(b, s)
	return b
}

// parseAssoc parses the variable field of A-ASSOCIATE-RQ (rq) or AC.
func parseAssoc(b []byte, rq bool) (*assocPDU, error) {
	// Fixed part: protocol version 2, reserved 2, called AE 16, calling
	// AE 16, reserved 32 (PS3.8 9.3.2, 9.3.3).
	if len(b) < 68 {
		return nil, protoErr(abortInvalidParam, "A-ASSOCIATE length %d below the fixed 68 bytes", len(b))
	}
	a := &assocPDU{
		protocolVersion: binary.BigEndian.Uint16(b),
		calledAE:        trimAE(b[4:20]),
		callingAE:       trimAE(b[20:36]),
	}
	pcType := byte(itemPresContextAC)
	if rq {
		pcType = itemPresContextRQ
	}
	err := eachItem(b[68:], func(typ byte, v []byte) error {
		switch typ {
		case itemAppContext:
			a.appContext = trimUID(v)
		case pcType:
			pc, err := parsePresContext(v, rq)
			if err != nil {
				return err
			}
			a.contexts = append(a.contexts, pc)
		case itemUserInfo:
			return eachItem(v, func(st byte, sv []byte) error {
				switch st {
				case itemMaxLength:
					if len(sv) != 4 {
						return protoErr(abortInvalidParam, "maximum length item of %d bytes", len(sv))
					}
					a.maxLength = binary.BigEndian.Uint32(sv)
				case itemImplClass:
					a.implClass = trimUID(sv)
				case itemImplVersion:
					a.implVersion = trimAE(sv)
				case itemAsyncWindow:
					a.asyncWindow = true
				}
				// Role selection (0x54) and extended negotiation items are
				// not answered: default roles apply (PS3.7 D.3.3.4).
				return nil
			})
		}
		// Unknown items are ignored as PS3.8 9.3.1 asks of a receiver.
		return nil
	})
	if err != nil {
		return nil, err
	}
	return a, nil
}

// eachItem walks items of the form type, reserved, 16-bit length, value.
func eachItem(b []byte, f func(typ byte, v []byte) error) error {
	for len(b) > 0 {
		if len(b) < 4 {
			return protoErr(abortInvalidParam, "truncated item header (%d bytes left)", len(b))
		}
		typ, n := b[0], int(binary.BigEndian.Uint16(b[2:]))
		if 4+n > len(b) {
			return protoErr(abortInvalidParam, "item 0x%02x length %d exceeds the %d bytes left", typ, n, len(b)-4)
		}
		if err := f(typ, b[4:4+n]); err != nil {
			return err
		}
		b = b[4+n:]
	}
	return nil
}

// parsePresContext parses a presentation context item (PS3.8 9.3.2.2,
// 9.3.3.2): ID, reserved, result (AC) / reserved (RQ), reserved, sub-items.
func parsePresContext(v []byte, rq bool) (presContext, error) {
	if len(v) < 4 {
		return presContext{}, protoErr(abortInvalidParam, "presentation context item of %d bytes", len(v))
	}
	pc := presContext{id: v[0]}
	if !rq {
		pc.result = v[2]
	}
	err := eachItem(v[4:], func(typ byte, sv []byte) error {
		switch typ {
		case itemAbstract:
			pc.abstract = trimUID(sv)
		case itemTransfer:
			pc.syntaxes = append(pc.syntaxes, trimUID(sv))
		}
		return nil
	})
	return pc, err
}

// appendItem appends an item header and value.
func appendItem(b []byte, typ byte, v []byte) []byte {
	b = append(b, typ, 0, byte(len(v)>>8), byte(len(v)))
	return append(b, v...)
}

// encodeAssoc builds the variable field of A-ASSOCIATE-RQ (rq) or AC.
func encodeAssoc(a *assocPDU, rq bool) []byte {
	b := make([]byte, 0, 512)
	b = binary.BigEndian.AppendUint16(b, a.protocolVersion)
	b = append(b, 0, 0)
	b = append(b, padAE(a.calledAE)...)
	b = append(b, padAE(a.callingAE)...)
	b = append(b, make([]byte, 32)...)
	b = appendItem(b, itemAppContext, []byte(a.appContext))
	for _, pc := range a.contexts {
		var v []byte
		if rq {
			v = append(v, pc.id, 0, 0, 0)
			v = appendItem(v, itemAbstract, []byte(pc.abstract))
		} else {
			v = append(v, pc.id, 0, pc.result, 0)
		}
		for _, ts := range pc.syntaxes {
			v = appendItem(v, itemTransfer, []byte(ts))
		}
		typ := byte(itemPresContextAC)
		if rq {
			typ = itemPresContextRQ
		}
		b = appendItem(b, typ, v)
	}
	var u []byte
	u = appendItem(u, itemMaxLength, binary.BigEndian.AppendUint32(nil, a.maxLength))
	u = appendItem(u, itemImplClass, []byte(a.implClass))
	if a.asyncWindow {
		// One outstanding operation each way: we are synchronous
		// (PS3.7 D.3.3.3).
		u = appendItem(u, itemAsyncWindow, []byte{0, 1, 0, 1})
	}
	u = appendItem(u, itemImplVersion, []byte(a.implVersion))
	return appendItem(b, itemUserInfo, u)
}
