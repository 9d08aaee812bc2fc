package dimse

import (
	"context"
	"errors"
	"fmt"
	"net"
	"slices"
	"time"

	"github.com/midsag/midsag"
)

// DefaultClientTimeout bounds each network step of a Client whose
// Timeout is zero (our choice).
const DefaultClientTimeout = 30 * time.Second

// maxContexts is the most presentation contexts one association can
// propose: odd IDs 1 to 255 (PS3.8 9.3.2.2).
const maxContexts = 128

// Client is a Verification and Storage SCU. The zero value with AE
// titles set is ready to use.
type Client struct {
	// CallingAE is our AE title, CalledAE the peer's.
	CallingAE, CalledAE string
	// MaxPDULength is the P-DATA-TF length we announce and accept; zero
	// means DefaultMaxPDULength.
	MaxPDULength uint32
	// Timeout bounds connecting and each PDU exchanged; zero means
	// DefaultClientTimeout.
	Timeout time.Duration
}

// scu is one association opened by a Client.
type scu struct {
	u        *ulConn
	r        *msgReader
	peerMax  uint32
	accepted map[byte]presContext
	msgID    uint16
	timeout  time.Duration
	stop     func() bool
}

// close drops the connection and the context watch.
func (a *scu) close() {
	a.stop()
	a.u.c.Close()
}

// Echo opens an association to addr, sends C-ECHO (PS3.7 9.3.5) and
// releases it. It returns nil when the peer answered success.
func (c *Client) Echo(ctx context.Context, addr string) error {
	a, err := c.open(ctx, addr, []presContext{{id: 1, abstract: verificationSOPClass,
		syntaxes: []string{midsag.ExplicitVRLittleEndian, midsag.ImplicitVRLittleEndian}}})
	if err != nil {
		return fmt.Errorf("echo %s: %w", addr, err)
	}
	defer a.close()
	if _, ok := a.accepted[1]; !ok {
		a.u.writeAbort(abortSourceUser, abortNotSpecified)
		return fmt.Errorf("echo %s: Verification not accepted", addr)
	}
	status, err := a.request(1, &command{field: cmdCEchoRQ, sopClass: verificationSOPClass, dataSetType: noDataSet}, nil, cmdCEchoRSP)
	if err != nil {
		return fmt.Errorf("echo %s: %w", addr, err)
	}
	if err := a.release(); err != nil {
		return fmt.Errorf("echo %s: %w", addr, err)
	}
	if status != StatusSuccess {
		return fmt.Errorf("echo %s: status 0x%04x", addr, status)
	}
	return nil
}

// Store sends each Part 10 file with C-STORE (PS3.7 9.3.1) over one
// association to addr, proposing each file's SOP class with the transfer
// syntax it is encoded in (no conversion), and returns one status per
// file. Files whose presentation context the peer refused get
// StatusSOPClassNotSupported without being sent. An error means the
// association failed; statuses then holds what was answered so far.
func (c *Client) Store(ctx context.Context, addr string, part10Files [][]byte) ([]uint16, error) {
	metas := make([]fileMeta, len(part10Files))
	type key struct{ sop, ts string }
	ids := map[key]byte{}
	var pcs []presContext
	for i, f := range part10Files {
		m, err := parsePart10(f)
		if err != nil {
			return nil, fmt.Errorf("store: file %d: %w", i, err)
		}
		metas[i] = m
		k := key{m.SOPClassUID, m.TransferSyntaxUID}
		if _, ok := ids[k]; !ok {
			if len(pcs) == maxContexts {
				return nil, fmt.Errorf("store: more than %d SOP class and transfer syntax pairs", maxContexts)
			}
			id := byte(2*len(pcs) + 1)
			ids[k] = id
			pcs = append(pcs, presContext{id: id, abstract: m.SOPClassUID, syntaxes: []string{m.TransferSyntaxUID}})
		}
	}
	a, err := c.open(ctx, addr, pcs)
	if err != nil {
		return nil, fmt.Errorf("store %s: %w", addr, err)
	}
	defer a.close()
	statuses := make([]uint16, 0, len(metas))
	for i, m := range metas {
		id := ids[key{m.SOPClassUID, m.TransferSyntaxUID}]
		if _, ok := a.accepted[id]; !ok {
			statuses = append(statuses, StatusSOPClassNotSupported)
			continue
		}
		if err := ctx.Err(); err != nil {
			a.u.writeAbort(abortSourceUser, abortNotSpecified)
			return statuses, fmt.Errorf("store %s: %w", addr, err)
		}
		cmd := &command{field: cmdCStoreRQ, sopClass: m.SOPClassUID, sopInstance: m.SOPInstanceUID, dataSetType: 0x0000}
		st, err := a.request(id, cmd, m.dataset, cmdCStoreRSP)
		if err != nil {
			return statuses, fmt.Errorf("store %s: file %d: %w", addr, i, err)
		}
		statuses = append(statuses, st)
	}
	if err := a.release(); err != nil {
		return statuses, fmt.Errorf("store %s: %w", addr, err)
	}
	return statuses, nil
}

// open connects and negotiates an association proposing pcs.
func (c *Client) open(ctx context.Context, addr string, pcs []presContext) (*scu, error) {
	if c.CallingAE == "" || len(c.CallingAE) > 16 || c.CalledAE == "" || len(c.CalledAE) > 16 {
		return nil, fmt.Errorf("AE titles %q and %q must have 1 to 16 characters (PS3.5 6.2)", c.CallingAE, c.CalledAE)
	}
	timeout := c.Timeout
	if timeout <= 0 {
		timeout = DefaultClientTimeout
	}
	maxLen := c.MaxPDULength
	if maxLen == 0 {
		maxLen = DefaultMaxPDULength
	}
	d := net.Dialer{Timeout: timeout}
	conn, err := d.DialContext(ctx, "tcp", addr)
	if err != nil {
		return nil, fmt.Errorf("connect: %w", err)
	}
	// Cancelling ctx unblocks any read or write by closing the socket.
	stop := context.AfterFunc(ctx, func() { conn.Close() })
	ok := false
	defer func() {
		if !ok {
			stop()
			conn.Close()
		}
	}()
	u := newULConn(conn)
	rq := &assocPDU{
		protocolVersion: 1, calledAE: c.CalledAE, callingAE: c.CallingAE,
		appContext: applicationContext, contexts: pcs, maxLength: maxLen,
		implClass: midsag.ImplementationClassUID, implVersion: midsag.ImplementationVersionName,
	}
	if err := u.writePDU(time.Now().Add(timeout), pduAssociateRQ, encodeAssoc(rq, true)); err != nil {
		return nil, fmt.Errorf("send A-ASSOCIATE-RQ: %w", err)
	}
	typ, body, err := u.readPDU(time.Now().Add(timeout), 0, minAssocPDU)
	if err != nil {
		return nil, fmt.Errorf("await A-ASSOCIATE-AC: %w", err)
	}
	switch typ {
	case pduAssociateAC:
	case pduAssociateRJ:
		if len(body) < 4 {
			return nil, errors.New("short A-ASSOCIATE-RJ")
		}
		return nil, &RejectError{Result: body[1], Source: body[2], Reason: body[3]}
	case pduAbort:
		return nil, ErrAborted
	default:
		u.writeAbort(abortSourceUser, abortUnexpectedPDU)
		return nil, fmt.Errorf("unexpected PDU type 0x%02x instead of A-ASSOCIATE-AC", typ)
	}
	ac, err := parseAssoc(body, false)
	if err != nil {
		u.writeAbort(abortSourceUser, abortInvalidParam)
		return nil, fmt.Errorf("parse A-ASSOCIATE-AC: %w", err)
	}
	a := &scu{u: u, peerMax: ac.maxLength, accepted: map[byte]presContext{}, timeout: timeout, stop: stop}
	proposed := map[byte]presContext{}
	for _, pc := range pcs {
		proposed[pc.id] = pc
	}
	for _, pc := range ac.contexts {
		p, ok := proposed[pc.id]
		// Accept only an answer naming a syntax we proposed (PS3.8
		// 9.3.3.2): the dataset is sent as encoded.
		if ok && pc.result == pcAccepted && len(pc.syntaxes) == 1 && slices.Contains(p.syntaxes, pc.syntaxes[0]) {
			a.accepted[pc.id] = p
		}
	}
	a.r = &msgReader{u: u, maxPData: maxLen, idle: timeout, sink: func(byte, *command) ([]byte, int64) {
		// Responses to C-ECHO and C-STORE carry no dataset; keep none.
		return nil, 0
	}}
	ok = true
	return a, nil
}

// request sends one request and waits for its response's status.
func (a *scu) request(pcID byte, cmd *command, data []byte, want uint16) (uint16, error) {
	a.msgID++
	cmd.messageID = a.msgID
	if err := a.u.writeMessage(a.timeout, a.peerMax, pcID, cmd, data); err != nil {
		return 0, err
	}
	m, typ, _, err := a.r.next()
	if err != nil {
		var pe *protocolError
		if errors.As(err, &pe) {
			a.u.writeAbort(abortSourceUser, pe.reason)
		}
		return 0, fmt.Errorf("await response: %w", err)
	}
	if m == nil {
		if typ == pduAbort {
			return 0, ErrAborted
		}
		a.u.writeAbort(abortSourceUser, abortUnexpectedPDU)
		return 0, fmt.Errorf("unexpected PDU type 0x%02x instead of a response", typ)
	}
	if m.cmd.field != want || m.cmd.respondingTo != cmd.messageID {
		a.u.writeAbort(abortSourceUser, abortInvalidParam)
		return 0, fmt.Errorf("response 0x%04x to message %d, want 0x%04x to %d", m.cmd.field, m.cmd.respondingTo, want, cmd.messageID)
	}
	return m.cmd.status, nil
}

// release ends the association with A-RELEASE-RQ/RP (PS3.8 7.2).
func (a *scu) release() error {
	if err := a.u.writePDU(time.Now().Add(a.timeout), pduReleaseRQ, make([]byte, 4)); err != nil {
		return fmt.Errorf("send A-RELEASE-RQ: %w", err)
	}
	typ, _, err := a.u.readPDU(time.Now().Add(a.timeout), a.r.maxPData, minAssocPDU)
	if err != nil {
		return fmt.Errorf("await A-RELEASE-RP: %w", err)
	}
	if typ != pduReleaseRP {
		return fmt.Errorf("unexpected PDU type 0x%02x instead of A-RELEASE-RP", typ)
	}
	return nil
}
