package dimse

import (
	"context"
	"io"
	"log/slog"
	"net"
	"testing"
	"time"

	"github.com/midsag/midsag"
	"github.com/midsag/midsag/part10"
)

// TestServeGracefulStop: cancelling Serve's context stops accepting but
// lets a running C-STORE finish and answer success; a handler that
// overruns DrainTimeout sees its context cancelled and Serve returns.
func TestServeGracefulStop(t *testing.T) {
	entered := make(chan struct{}, 1)
	h := func(ctx context.Context, _ Association, _ []byte) Status {
		entered <- struct{}{}
		select {
		case <-time.After(300 * time.Millisecond):
			return Status{Code: StatusSuccess}
		case <-ctx.Done():
			return Status{Code: StatusOutOfResources}
		}
	}
	for _, tc := range []struct {
		name  string
		drain time.Duration
		done  bool
	}{
		{"finishes within drain", 5 * time.Second, true},
		{"cut at drain bound", 50 * time.Millisecond, false},
	} {
		t.Run(tc.name, func(t *testing.T) {
			s, err := NewServer(Config{AETitle: "MIDSAG", DrainTimeout: tc.drain, Logger: slog.New(slog.NewTextHandler(io.Discard, nil))}, h)
			if err != nil {
				t.Fatal(err)
			}
			l, err := net.Listen("tcp", "127.0.0.1:0")
			if err != nil {
				t.Fatal(err)
			}
			ctx, cancel := context.WithCancel(context.Background())
			served := make(chan error, 1)
			go func() { served <- s.Serve(ctx, l) }()
			type result struct {
				st  []uint16
				err error
			}
			stored := make(chan result, 1)
			go func() {
				c := &Client{CallingAE: "T", CalledAE: "MIDSAG", Timeout: 5 * time.Second}
				f := part10.Wrap(part10.Meta{SOPClassUID: midsag.MRImageStorage, SOPInstanceUID: "1.2.3", TransferSyntaxUID: midsag.ImplicitVRLittleEndian}, []byte{8, 0, 0x18, 0, 0, 0, 0, 0})
				st, err := c.Store(context.Background(), l.Addr().String(), [][]byte{f})
				stored <- result{st, err}
			}()
			<-entered
			cancel()
			select {
			case err := <-served:
				if err != nil {
					t.Errorf("Serve: %v", err)
				}
			case <-time.After(5 * time.Second):
				t.Fatal("Serve did not return")
			}
			r := <-stored
			if tc.done {
				if r.err != nil || len(r.st) != 1 || r.st[0] != StatusSuccess {
					t.Errorf("Store during drain: %04x, %v", r.st, r.err)
				}
			} else if r.err == nil && (len(r.st) != 1 || r.st[0] == StatusSuccess) {
				// Cut at the bound, the instance must not count as stored:
				// either the association breaks or, when the handler sees
				// its context end first, it answers a failure status
				// (A700 out of resources) before the cut.
				t.Errorf("Store cut at the drain bound succeeded: %04x", r.st)
			}
			if _, err := net.DialTimeout("tcp", l.Addr().String(), time.Second); err == nil {
				t.Error("listener still accepts after Serve returned")
			}
		})
	}
}

// TestNewServerConfig: invalid configurations are refused up front.
func TestNewServerConfig(t *testing.T) {
	ok := func(context.Context, Association, []byte) Status { return Status{Code: StatusSuccess} }
	for _, cfg := range []Config{{}, {AETitle: "SEVENTEEN_CHARS_X"}, {AETitle: "A", MaxPDULength: 100}} {
		if _, err := NewServer(cfg, ok); err == nil {
			t.Errorf("NewServer(%+v) accepted", cfg)
		}
	}
	if _, err := NewServer(Config{AETitle: "A"}, nil); err == nil {
		t.Error("NewServer accepted a nil handler")
	}
}

// TestUnrecognizedOperation: a C-FIND-RQ (0x0020, PS3.7 Annex E, from
// memory) is answered with its response command 0x8020 and status 0211H
// (unrecognized operation), and the association goes on to C-ECHO.
func TestUnrecognizedOperation(t *testing.T) {
	_, addr, _ := startSCP(t, Config{}, (&received{}).handler(StatusSuccess))
	conn, err := net.Dial("tcp", addr)
	if err != nil {
		t.Fatal(err)
	}
	defer conn.Close()
	if _, err := conn.Write(echoRQ()); err != nil {
		t.Fatal(err)
	}
	u := newULConn(conn)
	deadline := time.Now().Add(5 * time.Second)
	if typ, _, err := u.readPDU(deadline, minAssocPDU, minAssocPDU); err != nil || typ != pduAssociateAC {
		t.Fatalf("A-ASSOCIATE-AC: type %d, %v", typ, err)
	}
	r := &msgReader{u: u, maxPData: minAssocPDU, idle: 5 * time.Second, sink: func(byte, *command) ([]byte, int64) { return nil, 0 }}
	for _, tc := range []struct{ rq, rsp, status uint16 }{{0x0020, 0x8020, 0x0211}, {cmdCEchoRQ, cmdCEchoRSP, 0}} {
		cmd := &command{field: tc.rq, sopClass: verificationSOPClass, messageID: 7, dataSetType: noDataSet}
		if err := u.writeMessage(time.Second, 16384, 1, cmd, nil); err != nil {
			t.Fatal(err)
		}
		m, typ, _, err := r.next()
		if err != nil || m == nil {
			t.Fatalf("response to 0x%04x: PDU %d, %v", tc.rq, typ, err)
		}
		if m.cmd.field != tc.rsp || m.cmd.status != tc.status || m.cmd.respondingTo != 7 {
			t.Errorf("response to 0x%04x: field 0x%04x status 0x%04x to %d", tc.rq, m.cmd.field, m.cmd.status, m.cmd.respondingTo)
		}
	}
}
