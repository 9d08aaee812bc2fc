package dimse

import (
	"context"
	"errors"
	"fmt"
	"io"
	"log/slog"
	"net"
	"os"
	"runtime/debug"
	"slices"
	"sync"
	"sync/atomic"
	"time"

	"github.com/midsag/midsag"
	"github.com/midsag/midsag/inputs"
	"github.com/midsag/midsag/part10"
)

// Defaults for zero Config fields (our choices unless noted).
const (
	// DefaultMaxPDULength is the P-DATA-TF length we announce: 1 MiB
	// keeps the per-PDU overhead negligible while bounding each read.
	DefaultMaxPDULength = 1 << 20
	// DefaultMaxAssociations bounds concurrent associations.
	DefaultMaxAssociations = 16
	// DefaultIdleTimeout is the longest silence within an association.
	DefaultIdleTimeout = 2 * time.Minute
	// DefaultARTIM is the ARTIM timer (PS3.8 9.1.5); 30 s matches the
	// ACSE timeout DCMTK's tools use by default (storescu --help).
	DefaultARTIM = 30 * time.Second
	// DefaultMaxDatasetBytes bounds one C-STORE dataset: the bound every
	// input edge puts on one instance (inputs.MaxInstanceBytes), which
	// the header reader behind the store applies too.
	DefaultMaxDatasetBytes = inputs.MaxInstanceBytes
	// DefaultDrainTimeout is how long Serve lets running associations
	// finish after its context is cancelled.
	DefaultDrainTimeout = 10 * time.Second
)

// DefaultTransferSyntaxes are the transfer syntaxes accepted, in
// preference order, when Config.TransferSyntaxes is empty: the
// uncompressed ones first, so a peer that offers both sends native
// pixels, then every compressed syntax midsag decodes. JPEG 2000 and
// JPEG-LS are accepted even by a binary built without their decoders: a
// peer that offers only them would fail its whole transfer otherwise, and
// the study is still refused, naming the package to install, when it is
// scored. JPEG Extended 12-bit is not accepted: midsag refuses it.
var DefaultTransferSyntaxes = []string{
	midsag.ExplicitVRLittleEndian, midsag.ImplicitVRLittleEndian, midsag.ExplicitVRBigEndian, midsag.DeflatedExplicitVRLittleEndian,
	midsag.RLELossless, midsag.JPEGLosslessSV1, midsag.JPEGLossless, midsag.JPEGLSLossless, midsag.JPEG2000Lossless,
	midsag.DeflatedImageFrameCompression, midsag.JPEGBaseline8Bit, midsag.JPEGLSNearLossless, midsag.JPEG2000,
}

// DefaultSOPClasses are the storage SOP classes accepted when
// Config.SOPClasses is empty: every Storage SOP Class (StorageSOPClasses),
// so that one instance midsag does not score never fails a PACS's
// transfer; what is not MR is stored and counted, not scored.
var DefaultSOPClasses = StorageSOPClassUIDs()

// Config configures a Server. Zero fields take the defaults above.
type Config struct {
	// AETitle is our AE title; an A-ASSOCIATE-RQ calling another one is
	// rejected with called-AE-title-not-recognized.
	AETitle string
	// AllowedCallingAEs lists the peers that may associate; empty allows
	// any. Others are rejected with calling-AE-title-not-recognized.
	AllowedCallingAEs []string
	// MaxPDULength is the maximum P-DATA-TF length we announce and
	// accept; longer PDUs end the association with A-ABORT.
	MaxPDULength uint32
	// MaxAssociations bounds concurrent associations; beyond it peers get
	// a transient A-ASSOCIATE-RJ, local-limit-exceeded.
	MaxAssociations int
	// IdleTimeout ends an association with A-ABORT when no PDU arrives
	// for this long.
	IdleTimeout time.Duration
	// ARTIM bounds the wait for A-ASSOCIATE-RQ after connect and for the
	// peer to close after A-RELEASE-RP or A-ASSOCIATE-RJ (PS3.8 9.1.5).
	ARTIM time.Duration
	// MaxDatasetBytes bounds one C-STORE dataset; larger ones are read
	// and discarded and answered with A700 (out of resources).
	MaxDatasetBytes int64
	// TransferSyntaxes are accepted in this preference order.
	TransferSyntaxes []string
	// SOPClasses are the storage SOP classes accepted; Verification is
	// always accepted.
	SOPClasses []string
	// IgnoreSOPClasses are accepted and answered with success, but not
	// handed to the StoreHandler: nothing of them is kept.
	IgnoreSOPClasses []string
	// StatusOf maps the reason of a refusal the listener makes itself
	// (too large, dataset not of the command's SOP class, no dataset) to
	// its DIMSE status; serve passes server.DICOMStatus, the one table of
	// statuses. Nil answers every such refusal with C000.
	StatusOf func(midsag.Reason) uint16
	// DrainTimeout bounds how long Serve waits for running associations
	// after its context is cancelled before closing them.
	DrainTimeout time.Duration
	// Logger receives association events; nil uses slog.Default().
	Logger *slog.Logger
}

// Association describes the peer of one association.
type Association struct {
	CallingAE, CalledAE, Remote string
}

// Status is a C-STORE response's Status (0000,0900) and, for a failure
// or warning, its Error Comment (0000,0902) (PS3.7 C.4, Table C.4-1).
type Status struct {
	// Code is StatusSuccess, a B000-BFFF warning or a failure: A7xx out
	// of resources, A9xx dataset does not match SOP class, Cxxx cannot
	// understand (PS3.4 B.2.3).
	Code uint16
	// Comment says why, without patient data; it is cut to the 64
	// characters of an LO (PS3.5 6.2).
	Comment string
}

// StoreHandler receives one C-STORE instance as a complete DICOM Part 10
// file (see Part10) and returns the status to send: StatusSuccess only
// after the instance is durable. The response is sent only after the
// handler returns.
type StoreHandler func(ctx context.Context, a Association, part10 []byte) Status

// Stats are a Server's counters since it was created.
type Stats struct {
	// Active is the number of associations currently established.
	Active int64
	// Total counts associations accepted with A-ASSOCIATE-AC.
	Total int64
	// Rejected counts A-ASSOCIATE-RJ sent.
	Rejected int64
	// Aborted counts associations we ended with A-ABORT or that the peer
	// aborted.
	Aborted int64
	// Echoes counts C-ECHO requests answered.
	Echoes int64
	// StoresOK counts C-STORE answered with success or a warning.
	StoresOK int64
	// StoresFailed counts C-STORE answered with a failure status.
	StoresFailed int64
	// Ignored counts instances of Config.IgnoreSOPClasses answered with
	// success and dropped.
	Ignored int64
	// OwnOutputs counts instances midsag made (midsag.IsOutputUID)
	// answered with success and dropped, never stored or scored again.
	OwnOutputs int64
}

// Server is a Verification and Storage SCP.
type Server struct {
	cfg      Config
	handler  StoreHandler
	log      *slog.Logger
	accepted map[string]bool // abstract syntaxes
	ignored  map[string]bool // SOP classes answered and dropped
	slots    chan struct{}
	rejects  chan struct{}

	active, total, rejected, aborted atomic.Int64
	echoes, storesOK, storesFailed   atomic.Int64
	ignoredN, ownOutputs             atomic.Int64

	wg    sync.WaitGroup
	mu    sync.Mutex
	conns map[net.Conn]struct{}
}

// NewServer checks cfg, fills in defaults and returns a Server that hands
// C-STORE instances to h.
func NewServer(cfg Config, h StoreHandler) (*Server, error) {
	if h == nil {
		return nil, errors.New("dimse: nil StoreHandler")
	}
	if cfg.AETitle == "" || len(cfg.AETitle) > 16 {
		return nil, fmt.Errorf("dimse: AE title %q must have 1 to 16 characters (PS3.5 6.2)", cfg.AETitle)
	}
	if cfg.MaxPDULength == 0 {
		cfg.MaxPDULength = DefaultMaxPDULength
	}
	if cfg.MaxPDULength < 1024 {
		return nil, fmt.Errorf("dimse: MaxPDULength %d below 1024", cfg.MaxPDULength)
	}
	if cfg.MaxAssociations <= 0 {
		cfg.MaxAssociations = DefaultMaxAssociations
	}
	if cfg.IdleTimeout <= 0 {
		cfg.IdleTimeout = DefaultIdleTimeout
	}
	if cfg.ARTIM <= 0 {
		cfg.ARTIM = DefaultARTIM
	}
	if cfg.MaxDatasetBytes <= 0 {
		cfg.MaxDatasetBytes = DefaultMaxDatasetBytes
	}
	if cfg.DrainTimeout <= 0 {
		cfg.DrainTimeout = DefaultDrainTimeout
	}
	if len(cfg.TransferSyntaxes) == 0 {
		cfg.TransferSyntaxes = DefaultTransferSyntaxes
	}
	if len(cfg.SOPClasses) == 0 {
		cfg.SOPClasses = DefaultSOPClasses
	}
	if cfg.Logger == nil {
		cfg.Logger = slog.Default()
	}
	if cfg.StatusOf == nil {
		cfg.StatusOf = func(midsag.Reason) uint16 { return StatusCannotUnderstand }
	}
	s := &Server{
		cfg:      cfg,
		handler:  h,
		log:      cfg.Logger.With("component", "dimse", "ae", cfg.AETitle),
		accepted: map[string]bool{verificationSOPClass: true},
		ignored:  map[string]bool{},
		slots:    make(chan struct{}, cfg.MaxAssociations),
		rejects:  make(chan struct{}, cfg.MaxAssociations),
		conns:    map[net.Conn]struct{}{},
	}
	for _, c := range cfg.SOPClasses {
		s.accepted[c] = true
	}
	for _, c := range cfg.IgnoreSOPClasses {
		s.accepted[c], s.ignored[c] = true, true
	}
	return s, nil
}

// Stats returns a snapshot of the counters.
func (s *Server) Stats() Stats {
	return Stats{
		Active: s.active.Load(), Total: s.total.Load(), Rejected: s.rejected.Load(),
		Aborted: s.aborted.Load(), Echoes: s.echoes.Load(),
		StoresOK: s.storesOK.Load(), StoresFailed: s.storesFailed.Load(),
		Ignored: s.ignoredN.Load(), OwnOutputs: s.ownOutputs.Load(),
	}
}

// Serve accepts associations on l until ctx is cancelled or l fails. On
// cancellation it stops accepting, lets running associations finish for
// up to Config.DrainTimeout, then closes the rest and returns nil.
func (s *Server) Serve(ctx context.Context, l net.Listener) error {
	// Handlers keep running during the drain; they see cancellation only
	// when the drain bound is reached.
	hctx, cancel := context.WithCancel(context.WithoutCancel(ctx))
	defer cancel()
	stop := context.AfterFunc(ctx, func() { l.Close() })
	defer stop()
	var err error
	for {
		conn, aerr := l.Accept()
		if aerr != nil {
			if ctx.Err() == nil {
				err = fmt.Errorf("dimse: accept: %w", aerr)
			}
			break
		}
		select {
		case s.slots <- struct{}{}:
			s.start(hctx, conn, true)
		default:
			select {
			case s.rejects <- struct{}{}:
				s.start(hctx, conn, false)
			default:
				// Even rejecting is bounded: past twice the limit the
				// connection is simply closed.
				conn.Close()
				s.rejected.Add(1)
			}
		}
	}
	l.Close()
	done := make(chan struct{})
	go func() { s.wg.Wait(); close(done) }()
	select {
	case <-done:
	case <-time.After(s.cfg.DrainTimeout):
		cancel()
		s.mu.Lock()
		for c := range s.conns {
			c.Close()
		}
		s.mu.Unlock()
		<-done
	}
	return err
}

// start runs one connection in its own goroutine; withSlot is false for
// a connection that is only read to be rejected.
func (s *Server) start(ctx context.Context, conn net.Conn, withSlot bool) {
	s.mu.Lock()
	s.conns[conn] = struct{}{}
	s.mu.Unlock()
	s.wg.Add(1)
	go func() {
		defer s.wg.Done()
		defer func() {
			if withSlot {
				<-s.slots
			} else {
				<-s.rejects
			}
			s.mu.Lock()
			delete(s.conns, conn)
			s.mu.Unlock()
			conn.Close()
		}()
		s.serveConn(ctx, conn, withSlot)
	}()
}

// assoc is the state of one established association.
type assoc struct {
	s        *Server
	u        *ulConn
	info     Association
	peerMax  uint32
	contexts map[byte]presContext // accepted: abstract and the one syntax
	log      *slog.Logger
}

// serveConn runs the association state machine (PS3.8 9.2) for one
// connection: negotiation, DIMSE messages, release or abort.
func (s *Server) serveConn(ctx context.Context, conn net.Conn, withSlot bool) {
	u := newULConn(conn)
	log := s.log.With("remote", conn.RemoteAddr().String())
	defer func() {
		// A bug or hostile input must cost one association, not the
		// process.
		if r := recover(); r != nil {
			s.aborted.Add(1)
			log.Error("association panic", "panic", fmt.Sprint(r), "stack", string(debug.Stack()))
			u.writeAbort(abortSourceProvider, abortNotSpecified)
		}
	}()
	// ARTIM runs from connect to A-ASSOCIATE-RQ (PS3.8 9.1.5, state Sta2).
	typ, body, err := u.readPDU(time.Now().Add(s.cfg.ARTIM), minAssocPDU, minAssocPDU)
	if err != nil {
		s.endOnError(u, log, "read A-ASSOCIATE-RQ", err)
		return
	}
	if typ != pduAssociateRQ {
		s.aborted.Add(1)
		log.Warn("expected A-ASSOCIATE-RQ", "pdu", typ)
		u.writeAbort(abortSourceProvider, abortUnexpectedPDU)
		return
	}
	rq, err := parseAssoc(body, true)
	if err != nil {
		s.endOnError(u, log, "parse A-ASSOCIATE-RQ", err)
		return
	}
	log = log.With("calling_ae", rq.callingAE, "called_ae", rq.calledAE)
	if result, source, reason, why := s.check(rq, withSlot); why != "" {
		s.rejected.Add(1)
		log.Info("association rejected", "reason", why)
		if err := u.writeReject(time.Now().Add(s.cfg.ARTIM), result, source, reason); err == nil {
			s.awaitClose(u)
		}
		return
	}
	a := &assoc{
		s: s, u: u, log: log, peerMax: rq.maxLength, contexts: map[byte]presContext{},
		info: Association{CallingAE: rq.callingAE, CalledAE: rq.calledAE, Remote: conn.RemoteAddr().String()},
	}
	ac := &assocPDU{
		protocolVersion: 1, calledAE: rq.calledAE, callingAE: rq.callingAE,
		appContext: applicationContext, maxLength: s.cfg.MaxPDULength,
		implClass: midsag.ImplementationClassUID, implVersion: midsag.ImplementationVersionName,
		asyncWindow: rq.asyncWindow,
	}
	for _, pc := range rq.contexts {
		res := s.negotiate(pc)
		ac.contexts = append(ac.contexts, res)
		if res.result == pcAccepted {
			a.contexts[pc.id] = presContext{id: pc.id, abstract: pc.abstract, syntaxes: res.syntaxes}
		}
	}
	if err := u.writePDU(time.Now().Add(s.cfg.ARTIM), pduAssociateAC, encodeAssoc(ac, false)); err != nil {
		log.Warn("send A-ASSOCIATE-AC", "err", err)
		return
	}
	s.total.Add(1)
	s.active.Add(1)
	defer s.active.Add(-1)
	log.Debug("association accepted", "contexts", len(rq.contexts), "accepted", len(a.contexts))
	a.run(ctx)
}

// check decides whether to reject an A-ASSOCIATE-RQ; why is empty when
// the association may proceed (PS3.8 9.3.4).
func (s *Server) check(rq *assocPDU, withSlot bool) (result, source, reason byte, why string) {
	switch {
	case rq.protocolVersion&1 == 0:
		return rjPermanent, rjSourceACSE, rjProtoVersion, "protocol-version-not-supported"
	case rq.appContext != applicationContext:
		return rjPermanent, rjSourceUser, rjAppContext, "application-context-name-not-supported"
	case rq.calledAE != s.cfg.AETitle:
		return rjPermanent, rjSourceUser, rjCalledAE, "called-AE-title-not-recognized"
	case len(s.cfg.AllowedCallingAEs) > 0 && !slices.Contains(s.cfg.AllowedCallingAEs, rq.callingAE):
		return rjPermanent, rjSourceUser, rjCallingAE, "calling-AE-title-not-recognized"
	case !withSlot:
		return rjTransient, rjSourcePresent, rjLocalLimit, "local-limit-exceeded"
	}
	return 0, 0, 0, ""
}

// negotiate answers one proposed presentation context (PS3.8 9.3.3.2):
// the first of our transfer syntaxes the peer proposed.
func (s *Server) negotiate(pc presContext) presContext {
	res := presContext{id: pc.id, result: pcAccepted}
	if !s.accepted[pc.abstract] {
		res.result = pcAbstractNotSupported
	} else {
		for _, ts := range s.cfg.TransferSyntaxes {
			if slices.Contains(pc.syntaxes, ts) {
				res.syntaxes = []string{ts}
				return res
			}
		}
		res.result = pcTransferNotSupported
	}
	// The transfer syntax sub-item is present but not significant when
	// the context is not accepted (PS3.8 9.3.3.2).
	res.syntaxes = []string{midsag.ImplicitVRLittleEndian}
	return res
}

// awaitClose waits up to ARTIM for the peer to close after A-RELEASE-RP
// or A-ASSOCIATE-RJ (PS3.8 9.1.5, state Sta13).
func (s *Server) awaitClose(u *ulConn) {
	_ = u.c.SetReadDeadline(time.Now().Add(s.cfg.ARTIM))
	_, _ = io.Copy(io.Discard, io.LimitReader(u.r, 1<<20))
}

// endOnError ends a connection after err: A-ABORT for protocol errors,
// just close for network errors and timeouts.
func (s *Server) endOnError(u *ulConn, log *slog.Logger, what string, err error) {
	var pe *protocolError
	switch {
	case errors.As(err, &pe):
		s.aborted.Add(1)
		log.Warn(what, "err", err)
		u.writeAbort(abortSourceProvider, pe.reason)
	case errors.Is(err, os.ErrDeadlineExceeded):
		s.aborted.Add(1)
		log.Info(what+": timeout", "err", err)
		u.writeAbort(abortSourceProvider, abortNotSpecified)
	case errors.Is(err, io.EOF), errors.Is(err, io.ErrUnexpectedEOF), errors.Is(err, net.ErrClosed):
		log.Debug(what+": connection closed", "err", err)
	default:
		log.Info(what, "err", err)
	}
}

// run serves DIMSE messages until release, abort or error.
func (a *assoc) run(ctx context.Context) {
	s := a.s
	r := &msgReader{u: a.u, maxPData: s.cfg.MaxPDULength, idle: s.cfg.IdleTimeout, sink: a.sink}
	for {
		msg, typ, _, err := r.next()
		if err != nil {
			s.endOnError(a.u, a.log, "association", err)
			return
		}
		if msg == nil {
			switch {
			case typ == pduReleaseRQ && !r.inMessage():
				if err := a.u.writePDU(time.Now().Add(s.cfg.ARTIM), pduReleaseRP, make([]byte, 4)); err == nil {
					s.awaitClose(a.u)
				}
			case typ == pduAbort:
				s.aborted.Add(1)
				a.log.Info("association aborted by peer")
			default:
				s.aborted.Add(1)
				a.log.Warn("unexpected PDU", "pdu", typ)
				a.u.writeAbort(abortSourceProvider, abortUnexpectedPDU)
			}
			return
		}
		if err := a.handle(ctx, msg); err != nil {
			s.endOnError(a.u, a.log, "DIMSE", err)
			return
		}
	}
}

// sink puts the File Meta Information in front of a C-STORE dataset as
// it arrives so the Part 10 file is built without a second copy.
func (a *assoc) sink(pcID byte, cmd *command) ([]byte, int64) {
	pc, ok := a.contexts[pcID]
	if !ok || cmd.field != cmdCStoreRQ {
		// Datasets of requests we refuse anyway are read and dropped.
		return nil, 0
	}
	meta := part10.Meta{SOPClassUID: cmd.sopClass, SOPInstanceUID: cmd.sopInstance, TransferSyntaxUID: pc.syntaxes[0], SourceAETitle: a.info.CallingAE}
	return part10.Header(meta, 64<<10), a.s.cfg.MaxDatasetBytes
}

// handle answers one DIMSE request (PS3.7 9.3).
func (a *assoc) handle(ctx context.Context, m *message) error {
	pc, ok := a.contexts[m.pcID]
	if !ok {
		return protoErr(abortInvalidParam, "message on presentation context %d, which was not accepted", m.pcID)
	}
	cmd := m.cmd
	if !cmd.hasMessageID && cmd.field != cmdCCancelRQ {
		return protoErr(abortInvalidParam, "command 0x%04x without Message ID", cmd.field)
	}
	rsp := &command{sopClass: cmd.sopClass, respondingTo: cmd.messageID, dataSetType: noDataSet, sopInstance: cmd.sopInstance}
	switch {
	case cmd.field == cmdCEchoRQ:
		// PS3.7 9.3.5 C-ECHO.
		rsp.field, rsp.sopInstance = cmdCEchoRSP, ""
		a.s.echoes.Add(1)
	case cmd.field == cmdCStoreRQ:
		// PS3.7 9.3.1 C-STORE.
		rsp.field = cmdCStoreRSP
		st := a.store(ctx, pc, m)
		rsp.status, rsp.errorComment = st.Code, st.Comment
		a.count(cmd, st)
	case cmd.field == cmdCCancelRQ:
		// C-CANCEL has no response (PS3.7 9.3.2.3) and nothing of ours
		// is cancellable.
		return nil
	case requestsWithResponse[cmd.field]:
		rsp.field, rsp.status = cmd.field|0x8000, StatusUnrecognizedOperation
	default:
		return protoErr(abortUnexpectedPDU, "unexpected DIMSE command field 0x%04x", cmd.field)
	}
	return a.u.writeMessage(a.s.cfg.IdleTimeout, a.peerMax, m.pcID, rsp, nil)
}

// count counts a C-STORE response and logs a refusal: status, reason
// and the UIDs of the command, never the dataset's patient attributes.
func (a *assoc) count(cmd *command, st Status) {
	if st.Code == StatusSuccess || st.Code&0xF000 == 0xB000 {
		a.s.storesOK.Add(1)
		return
	}
	a.s.storesFailed.Add(1)
	a.log.Warn("C-STORE refused", "status", fmt.Sprintf("%04X", st.Code), "comment", st.Comment,
		"sop_class_uid", cmd.sopClass, "sop_instance_uid", cmd.sopInstance, "message_id", cmd.messageID)
}

// refuse is the status of a refusal the listener makes itself, through
// Config.StatusOf.
func (a *assoc) refuse(r midsag.Reason, comment string) Status {
	return Status{Code: a.s.cfg.StatusOf(r), Comment: comment}
}

// store checks a C-STORE request, answers midsag's own outputs and
// ignored classes itself, and hands the rest to the handler.
func (a *assoc) store(ctx context.Context, pc presContext, m *message) Status {
	cmd := m.cmd
	switch {
	case !cmd.hasDataSet():
		return a.refuse(midsag.ReasonBadRequest, "C-STORE-RQ without a data set")
	case m.overflow:
		return a.refuse(midsag.ReasonTooLarge, fmt.Sprintf("data set above the limit of %d bytes", a.s.cfg.MaxDatasetBytes))
	case cmd.sopClass != pc.abstract:
		// The Affected SOP Class must be the context's abstract syntax
		// (PS3.7 9.1.1.1.1 via the presentation context).
		return Status{Code: StatusSOPClassNotSupported, Comment: "Affected SOP Class differs from the presentation context"}
	case cmd.sopInstance == "":
		return a.refuse(midsag.ReasonBadRequest, "C-STORE-RQ without Affected SOP Instance UID")
	}
	if st, done := a.screen(cmd, pc, m.data); done {
		m.data = nil
		return st
	}
	status := a.s.handler(ctx, a.info, m.data)
	m.data = nil
	return status
}

// screen answers, without the handler, an instance that is midsag's own
// output or of an ignored class, and refuses one whose dataset names
// another SOP Class or Instance than its command (PS3.4 B.2.3: A900).
func (a *assoc) screen(cmd *command, pc presContext, file []byte) (Status, bool) {
	if midsag.IsOutputUID(cmd.sopInstance) {
		a.s.ownOutputs.Add(1)
		a.log.Info("C-STORE of midsag's own output acknowledged and dropped", "sop_class_uid", cmd.sopClass, "sop_instance_uid", cmd.sopInstance)
		return Status{Code: StatusSuccess}, true
	}
	if a.s.ignored[cmd.sopClass] {
		a.s.ignoredN.Add(1)
		return Status{Code: StatusSuccess}, true
	}
	_, ds, err := part10.Parse(file)
	if err != nil {
		return Status{}, false
	}
	class, inst, ok := datasetUIDs(pc.syntaxes[0], ds)
	switch {
	case ok && class != cmd.sopClass:
		return a.refuse(midsag.ReasonSOPClassMismatch, "SOP Class UID (0008,0016) differs from the command's"), true
	case ok && inst != cmd.sopInstance:
		return a.refuse(midsag.ReasonSOPClassMismatch, "SOP Instance UID (0008,0018) differs from the command's"), true
	}
	return Status{}, false
}
