package dimse

import (
	"bytes"
	"context"
	"encoding/binary"
	"errors"
	"io"
	"log/slog"
	"math/rand/v2"
	"net"
	"strings"
	"sync"
	"testing"
	"time"

	"github.com/midsag/midsag"
	"github.com/midsag/midsag/part10"
)

// readAll reads from c until EOF or the bound, reporting whether the
// peer closed within it.
func readAll(t *testing.T, c net.Conn, bound time.Duration) ([]byte, bool) {
	t.Helper()
	_ = c.SetReadDeadline(time.Now().Add(bound))
	b, err := io.ReadAll(c)
	var ne net.Error
	if errors.As(err, &ne) && ne.Timeout() {
		return b, false
	}
	return b, true
}

// pdu frames a PDU (PS3.8 9.3.1 header, from memory: type, reserved,
// 32-bit big-endian length).
func pdu(typ byte, body []byte) []byte {
	b := []byte{typ, 0, 0, 0, 0, 0}
	binary.BigEndian.PutUint32(b[2:], uint32(len(body)))
	return append(b, body...)
}

// echoRQ is an A-ASSOCIATE-RQ for Verification from AE "T" to "MIDSAG".
func echoRQ() []byte {
	return pdu(pduAssociateRQ, encodeAssoc(&assocPDU{
		protocolVersion: 1, calledAE: "MIDSAG", callingAE: "T", appContext: applicationContext,
		contexts:  []presContext{{id: 1, abstract: verificationSOPClass, syntaxes: []string{midsag.ImplicitVRLittleEndian}}},
		maxLength: 16384, implClass: midsag.ImplementationClassUID, implVersion: midsag.ImplementationVersionName,
	}, true))
}

// abortPDU is A-ABORT from the service provider with a reason (PS3.8
// 9.3.8, from memory: reserved 2 bytes, source 2, reason).
func abortPDU(reason byte) []byte { return pdu(pduAbort, []byte{0, 0, 2, reason}) }

// TestBadInput: hostile or broken byte streams end the connection within
// a bound, with A-ABORT where the standard asks for one, and the server
// keeps serving (checked with our SCU's Echo afterwards).
func TestBadInput(t *testing.T) {
	rng := rand.New(rand.NewPCG(1, 2))
	random := make([]byte, 4096)
	for i := range random {
		random[i] = byte(rng.UintN(256))
	}
	rq := echoRQ()
	for _, tc := range []struct {
		name string
		send []byte
		// want is a prefix the server's reply must start with; nil
		// accepts any reply ending in a close.
		want []byte
	}{
		{"random bytes", random, nil},
		{"unknown PDU type", pdu(0x09, []byte{1, 2, 3, 4}), abortPDU(abortUnrecognizedPDU)},
		{"length above maximum", []byte{pduAssociateRQ, 0, 0xFF, 0xFF, 0xFF, 0xFF}, abortPDU(abortInvalidParam)},
		{"truncated A-ASSOCIATE-RQ", rq[:len(rq)/2], nil},
		{"short A-ASSOCIATE-RQ", pdu(pduAssociateRQ, make([]byte, 20)), abortPDU(abortInvalidParam)},
		{"item length past the end", pdu(pduAssociateRQ, append(make([]byte, 68), 0x10, 0, 0xFF, 0xFF)), abortPDU(abortInvalidParam)},
		{"P-DATA before association", pdu(pduDataTF, []byte{0, 0, 0, 2, 1, 3}), abortPDU(abortUnexpectedPDU)},
		{"P-DATA above maximum", append(append([]byte{}, rq...), pduDataTF, 0, 0, 0, 0x40, 0x01), abortPDU(abortInvalidParam)},
		{"PDV length lies", append(append([]byte{}, rq...), pdu(pduDataTF, []byte{0, 0, 0x10, 0, 1, 3})...), abortPDU(abortInvalidParam)},
		{"dataset without command", append(append([]byte{}, rq...), pdu(pduDataTF, []byte{0, 0, 0, 3, 1, 2, 0})...), abortPDU(abortUnexpectedPDU)},
		{"garbage command set", append(append([]byte{}, rq...), pdu(pduDataTF, []byte{0, 0, 0, 6, 1, 3, 9, 9, 9, 9})...), abortPDU(abortInvalidParam)},
		{"context not accepted", append(append([]byte{}, rq...), pdu(pduDataTF, append([]byte{0, 0, 0, 0, 5, 3}, (&command{field: cmdCEchoRQ, messageID: 1, dataSetType: noDataSet}).encode()...))...), abortPDU(abortInvalidParam)},
	} {
		t.Run(tc.name, func(t *testing.T) {
			_, addr, _ := startSCP(t, Config{MaxPDULength: 16384, ARTIM: 2 * time.Second}, (&received{}).handler(StatusSuccess))
			c, err := net.Dial("tcp", addr)
			if err != nil {
				t.Fatal(err)
			}
			defer c.Close()
			if tc.name == "P-DATA above maximum" {
				// Declare 16385+ bytes: one more than the 16384 we allow.
				binary.BigEndian.PutUint32(tc.send[len(rq)+2:], 16385)
			}
			_, _ = c.Write(tc.send)
			if tc.name == "truncated A-ASSOCIATE-RQ" {
				_ = c.(*net.TCPConn).CloseWrite()
			}
			got, closed := readAll(t, c, 5*time.Second)
			if !closed {
				t.Fatalf("connection still open after 5 s; got % x", got)
			}
			if bytes.HasPrefix(got, []byte{pduAssociateAC}) {
				// Skip the A-ASSOCIATE-AC we asked for.
				n := 6 + int(binary.BigEndian.Uint32(got[2:]))
				got = got[min(n, len(got)):]
			}
			if tc.want != nil && !bytes.Equal(got, tc.want) {
				t.Errorf("reply % x, want % x", got, tc.want)
			}
			if err := (&Client{CallingAE: "T", CalledAE: "MIDSAG", Timeout: 5 * time.Second}).Echo(context.Background(), addr); err != nil {
				t.Errorf("server unusable afterwards: %v", err)
			}
		})
	}
}

// TestARTIM: a connection that sends nothing is closed once ARTIM
// expires (PS3.8 9.1.5), not before.
func TestARTIM(t *testing.T) {
	const artim = 300 * time.Millisecond
	_, addr, _ := startSCP(t, Config{ARTIM: artim}, (&received{}).handler(StatusSuccess))
	c, err := net.Dial("tcp", addr)
	if err != nil {
		t.Fatal(err)
	}
	defer c.Close()
	start := time.Now()
	if _, closed := readAll(t, c, 5*time.Second); !closed {
		t.Fatal("connection still open 5 s after connect")
	}
	if d := time.Since(start); d < artim-50*time.Millisecond {
		t.Errorf("closed after %v, before ARTIM %v", d, artim)
	}
}

// TestIdleTimeout: an association that falls silent is aborted after
// IdleTimeout.
func TestIdleTimeout(t *testing.T) {
	_, addr, _ := startSCP(t, Config{IdleTimeout: 300 * time.Millisecond}, (&received{}).handler(StatusSuccess))
	c := dialEcho(t, addr)
	got, closed := readAll(t, c, 5*time.Second)
	if !closed || len(got) == 0 || got[0] != pduAssociateAC {
		t.Fatalf("closed=%v reply % x, want A-ASSOCIATE-AC then close", closed, got[:min(len(got), 16)])
	}
	n := 6 + int(binary.BigEndian.Uint32(got[2:]))
	if !bytes.Equal(got[n:], abortPDU(abortNotSpecified)) {
		t.Errorf("after AC got % x, want A-ABORT", got[n:])
	}
}

// TestHandlerPanic: a panicking handler costs its association an
// A-ABORT; the server goes on.
func TestHandlerPanic(t *testing.T) {
	s, addr, _ := startSCP(t, Config{}, func(context.Context, Association, []byte) Status { panic("boom") })
	files := [][]byte{part10.Wrap(part10.Meta{SOPClassUID: midsag.MRImageStorage, SOPInstanceUID: "1.2.3", TransferSyntaxUID: midsag.ImplicitVRLittleEndian}, []byte{8, 0, 0x18, 0, 0, 0, 0, 0})}
	c := &Client{CallingAE: "T", CalledAE: "MIDSAG", Timeout: 5 * time.Second}
	if _, err := c.Store(context.Background(), addr, files); !errors.Is(err, ErrAborted) {
		t.Errorf("Store with a panicking handler: %v, want ErrAborted", err)
	}
	if err := c.Echo(context.Background(), addr); err != nil {
		t.Errorf("Echo after the panic: %v", err)
	}
	if st := s.Stats(); st.Aborted != 1 {
		t.Errorf("stats %+v", st)
	}
}

// lockedBuffer is a log sink shared by fuzz workers' goroutines.
type lockedBuffer struct {
	mu sync.Mutex
	b  bytes.Buffer
}

func (l *lockedBuffer) Write(p []byte) (int, error) {
	l.mu.Lock()
	defer l.mu.Unlock()
	return l.b.Write(p)
}

func (l *lockedBuffer) take() string {
	l.mu.Lock()
	defer l.mu.Unlock()
	s := l.b.String()
	l.b.Reset()
	return s
}

// FuzzServeConn feeds arbitrary bytes to one association: it must end
// within a bound and never reach the per-association panic recovery
// (which logs "association panic").
func FuzzServeConn(f *testing.F) {
	rq := echoRQ()
	echo := (&command{field: cmdCEchoRQ, sopClass: verificationSOPClass, messageID: 1, dataSetType: noDataSet}).encode()
	f.Add(rq)
	f.Add(append(append([]byte{}, rq...), pdu(pduDataTF, append([]byte{0, 0, 0, byte(len(echo) + 2), 1, 3}, echo...))...))
	f.Add(append(append([]byte{}, rq...), pdu(pduReleaseRQ, make([]byte, 4))...))
	f.Add([]byte{pduAssociateRQ, 0, 0, 0, 0, 0x44})
	var logs lockedBuffer
	s, err := NewServer(Config{AETitle: "MIDSAG", ARTIM: 100 * time.Millisecond, IdleTimeout: 100 * time.Millisecond,
		MaxPDULength: 4096, Logger: slog.New(slog.NewTextHandler(&logs, nil))}, (&received{}).handler(StatusSuccess))
	if err != nil {
		f.Fatal(err)
	}
	f.Fuzz(func(t *testing.T, in []byte) {
		srv, cli := net.Pipe()
		// The pipe is synchronous: read the server's replies while
		// writing, and close after writing so the server sees EOF.
		go func() { _, _ = io.Copy(io.Discard, cli) }()
		go func() {
			_, _ = cli.Write(in)
			cli.Close()
		}()
		done := make(chan struct{})
		go func() {
			defer close(done)
			s.serveConn(context.Background(), srv, true)
		}()
		select {
		case <-done:
		case <-time.After(5 * time.Second):
			t.Fatal("association did not end within 5 s")
		}
		srv.Close()
		cli.Close()
		if l := logs.take(); strings.Contains(l, "association panic") {
			t.Fatalf("panic recovered:\n%s", l)
		}
	})
}
