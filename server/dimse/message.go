package dimse

import (
	"encoding/binary"
	"fmt"
	"time"
)

// defaultSendFragment bounds PDVs we send when the peer announced no
// maximum length (0 = unlimited, PS3.8 D.1); 1 MiB is our choice.
const defaultSendFragment = 1 << 20

// message is one reassembled DIMSE message: its command set and, when
// one followed, the dataset (PS3.7 6.3).
type message struct {
	pcID byte
	cmd  *command
	// data holds prefix (see msgReader.sink) followed by the dataset.
	data []byte
	// overflow is true when the dataset exceeded the sink's limit and
	// was discarded.
	overflow bool
}

// msgReader reassembles DIMSE messages from P-DATA-TF PDUs (PS3.8 9.3.5,
// Annex E) and hands back any other PDU unchanged.
type msgReader struct {
	u *ulConn
	// maxPData is the longest P-DATA-TF variable field accepted: the
	// maximum length we announced.
	maxPData uint32
	// idle is the longest wait for a PDU; zero waits forever.
	idle time.Duration
	// sink returns, for a command announcing a dataset, the bytes to put
	// before the dataset and how many dataset bytes to keep at most.
	sink func(pcID byte, cmd *command) (prefix []byte, max int64)

	pending []byte // PDVs of the current PDU not yet consumed
	cur     *message
	cmdBuf  []byte
	dataMax int64
	dataLen int64
	inData  bool
}

// next returns the next complete message, or the type and body of the
// next PDU that is not P-DATA-TF (msg nil). A non-P-DATA PDU arriving in
// the middle of a message is returned too; inMessage tells the caller.
func (r *msgReader) next() (msg *message, typ byte, body []byte, err error) {
	for {
		for len(r.pending) > 0 {
			m, err := r.pdv()
			if err != nil || m != nil {
				return m, 0, nil, err
			}
		}
		var deadline time.Time
		if r.idle > 0 {
			deadline = time.Now().Add(r.idle)
		}
		typ, body, err := r.u.readPDU(deadline, r.maxPData, minAssocPDU)
		if err != nil {
			return nil, 0, nil, err
		}
		if typ != pduDataTF {
			return nil, typ, body, nil
		}
		if len(body) == 0 {
			return nil, 0, nil, protoErr(abortInvalidParam, "P-DATA-TF without PDV items")
		}
		r.pending = body
	}
}

// inMessage reports whether a message has been started but not finished.
func (r *msgReader) inMessage() bool { return r.cur != nil }

// pdv consumes one PDV item from r.pending.
func (r *msgReader) pdv() (*message, error) {
	p := r.pending
	// PDV item: 32-bit length, context ID, message control header,
	// fragment (PS3.8 9.3.5.1, E.2).
	if len(p) < 6 {
		return nil, protoErr(abortInvalidParam, "truncated PDV item (%d bytes)", len(p))
	}
	n := binary.BigEndian.Uint32(p)
	if n < 2 || uint64(n) > uint64(len(p)-4) {
		return nil, protoErr(abortInvalidParam, "PDV length %d does not fit the %d bytes left", n, len(p)-4)
	}
	pcID, mch, frag := p[4], p[5], p[6:4+n]
	r.pending = p[4+n:]
	isCmd, last := mch&1 != 0, mch&2 != 0
	if mch&^3 != 0 {
		return nil, protoErr(abortInvalidParam, "message control header 0x%02x has reserved bits set", mch)
	}
	if r.cur == nil {
		if !isCmd {
			return nil, protoErr(abortUnexpectedPDU, "dataset fragment without a command")
		}
		r.cur = &message{pcID: pcID}
		r.cmdBuf = r.cmdBuf[:0]
	}
	if pcID != r.cur.pcID {
		return nil, protoErr(abortInvalidParam, "PDV on presentation context %d inside a message on context %d", pcID, r.cur.pcID)
	}
	if !r.inData {
		if !isCmd {
			return nil, protoErr(abortUnexpectedPDU, "dataset fragment before the command's last fragment")
		}
		if len(r.cmdBuf)+len(frag) > maxCommandBytes {
			return nil, protoErr(abortInvalidParam, "command set longer than %d bytes", maxCommandBytes)
		}
		r.cmdBuf = append(r.cmdBuf, frag...)
		if !last {
			return nil, nil
		}
		cmd, err := parseCommand(r.cmdBuf)
		if err != nil {
			return nil, protoErr(abortInvalidParam, "%v", err)
		}
		r.cur.cmd = cmd
		if !cmd.hasDataSet() {
			return r.finish(), nil
		}
		r.inData, r.dataLen = true, 0
		prefix, max := r.sink(pcID, cmd)
		r.cur.data, r.dataMax = prefix, max
		return nil, nil
	}
	if isCmd {
		return nil, protoErr(abortUnexpectedPDU, "command fragment inside a dataset")
	}
	r.dataLen += int64(len(frag))
	if r.dataLen > r.dataMax {
		// Keep reading to the last fragment so the association survives,
		// but drop what we have (PS3.4 B.2.3: A700 out of resources).
		r.cur.overflow, r.cur.data = true, nil
	} else {
		r.cur.data = append(r.cur.data, frag...)
	}
	if last {
		return r.finish(), nil
	}
	return nil, nil
}

func (r *msgReader) finish() *message {
	m := r.cur
	r.cur, r.inData = nil, false
	return m
}

// fragmentSize is the data bytes per PDV for a peer's maximum length.
func fragmentSize(peerMax uint32) int {
	if peerMax == 0 {
		return defaultSendFragment
	}
	// The PDU variable field holds the PDV's 4-byte length, context ID
	// and control header before the fragment (PS3.8 9.3.5).
	return max(int(peerMax)-6, 1)
}

// writeMessage sends a command and optional dataset on context pcID in
// PDVs no longer than the peer accepts (PS3.8 E.2).
func (u *ulConn) writeMessage(timeout time.Duration, peerMax uint32, pcID byte, cmd *command, data []byte) error {
	frag := fragmentSize(peerMax)
	send := func(b []byte, isCmd bool) error {
		for {
			n := min(len(b), frag)
			var deadline time.Time
			if timeout > 0 {
				deadline = time.Now().Add(timeout)
			}
			if err := u.writePDV(deadline, pcID, isCmd, n == len(b), b[:n]); err != nil {
				return err
			}
			b = b[n:]
			if len(b) == 0 {
				return nil
			}
		}
	}
	if err := send(cmd.encode(), true); err != nil {
		return fmt.Errorf("send command 0x%04x: %w", cmd.field, err)
	}
	if data == nil {
		return nil
	}
	if err := send(data, false); err != nil {
		return fmt.Errorf("send dataset: %w", err)
	}
	return nil
}
