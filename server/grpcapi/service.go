package grpcapi

import (
	"context"
	"errors"
	"fmt"
	"io"

	"google.golang.org/grpc/peer"

	"github.com/midsag/midsag"
	midsagv1 "github.com/midsag/midsag/api/midsag/v1"
	"github.com/midsag/midsag/server"
)

// service implements midsagv1.StudyScoringServer over a Backend. The REST
// gateway calls the same methods in-process.
type service struct {
	midsagv1.UnimplementedStudyScoringServer
	cfg Config
}

// statuses are the record statuses a ListResults filter may name.
var statuses = map[string]bool{
	server.StatusPending: true, server.StatusRunning: true, server.StatusDone: true,
	server.StatusRejected: true, server.StatusFailed: true,
}

// GetResult returns one result version.
func (s *service) GetResult(ctx context.Context, req *midsagv1.GetResultRequest) (*midsagv1.Result, error) {
	if req.GetResultId() == "" {
		return nil, grpcStatus(midsag.Rejectf(midsag.ReasonBadRequest, "result_id is required"))
	}
	rec, err := s.cfg.Backend.Result(ctx, req.GetResultId())
	if err != nil {
		return nil, grpcStatus(err)
	}
	res, err := ResultProto(rec)
	if err != nil {
		return nil, grpcStatus(err)
	}
	return res, nil
}

// ListResults lists result versions, newest first.
func (s *service) ListResults(ctx context.Context, req *midsagv1.ListResultsRequest) (*midsagv1.ListResultsResponse, error) {
	if st := req.GetStatus(); st != "" && !statuses[st] {
		return nil, grpcStatus(midsag.Rejectf(midsag.ReasonBadRequest, "status %q is not one of pending, running, done, rejected, failed", st))
	}
	if req.GetPageSize() < 0 {
		return nil, grpcStatus(midsag.Rejectf(midsag.ReasonBadRequest, "page_size must not be negative"))
	}
	recs, next, err := s.cfg.Backend.Results(ctx, server.Query{
		StudyInstanceUID: req.GetStudyInstanceUid(),
		Status:           req.GetStatus(),
		PageSize:         int(req.GetPageSize()),
		PageToken:        req.GetPageToken(),
	})
	if err != nil {
		return nil, grpcStatus(err)
	}
	out := &midsagv1.ListResultsResponse{Results: make([]*midsagv1.Result, 0, len(recs)), NextPageToken: next}
	for _, rec := range recs {
		res, err := ResultProto(rec)
		if err != nil {
			return nil, grpcStatus(err)
		}
		out.Results = append(out.Results, res)
	}
	return out, nil
}

// ListModels lists the models a request may name.
func (s *service) ListModels(ctx context.Context, _ *midsagv1.ListModelsRequest) (*midsagv1.ListModelsResponse, error) {
	return modelsProto(s.cfg.Backend.Models(ctx)), nil
}

// ScoreStudy streams each instance of the stream into the spool as its
// chunks arrive, and when the stream closes stores them all and scores
// them as one study; a refused stream stores nothing.
func (s *service) ScoreStudy(stream midsagv1.StudyScoring_ScoreStudyServer) error {
	ctx := stream.Context()
	origin := server.Origin{Listener: "grpc"}
	if p, ok := peer.FromContext(ctx); ok && p.Addr != nil {
		origin.Remote = p.Addr.String()
	}
	ing := &ingester{backend: s.cfg.Backend, origin: origin}
	defer ing.abort()
	cr := &chunkReader{stream: stream, maxTotal: s.cfg.MaxBodyBytes}
	for {
		more, err := cr.next()
		if err != nil {
			return err
		}
		if !more {
			break
		}
		name := fmt.Sprintf("instance %d", len(ing.staged)+1)
		if err := ing.receive(ctx, name, cr, s.cfg.Limits.MaxEntryBytes); err != nil {
			if cr.err != nil {
				return cr.err
			}
			return grpcStatus(err)
		}
	}
	if err := ing.commit(ctx); err != nil {
		return grpcStatus(err)
	}
	res, err := score(ctx, s.cfg.Backend, ing.uids, cr.opts)
	if err != nil {
		return grpcStatus(err)
	}
	return stream.SendAndClose(&midsagv1.ScoreStudyResponse{Result: res})
}

// chunkReader reads the instances of a ScoreStudy stream one after the
// other: next waits for the first chunk of the next instance, Read
// returns its bytes until the chunk marked end_of_instance (or the
// stream's end). Only the message being read is in memory.
type chunkReader struct {
	stream   midsagv1.StudyScoring_ScoreStudyServer
	maxTotal int64
	opts     *midsagv1.ScoreOptions
	n        int   // messages received
	total    int64 // chunk bytes received
	cur      []byte
	last     bool // cur ends its instance
	eof      bool // the stream has ended
	// err is a gRPC status that ends the stream (the transport's, or a
	// protocol refusal), as opposed to a refusal of one instance.
	err error
}

// recv takes the next chunk into cur; false at the stream's end.
func (c *chunkReader) recv() (bool, error) {
	for !c.eof {
		msg, err := c.stream.Recv()
		if errors.Is(err, io.EOF) {
			c.eof = true
			return false, nil
		}
		if err != nil {
			return false, err // the transport's own status
		}
		c.n++
		switch part := msg.GetPart().(type) {
		case *midsagv1.ScoreStudyRequest_Options:
			if c.n > 1 {
				return false, grpcStatus(midsag.Rejectf(midsag.ReasonBadRequest, "options may only be the first message of the stream"))
			}
			c.opts = part.Options
		case *midsagv1.ScoreStudyRequest_Chunk:
			c.total += int64(len(part.Chunk.GetData()))
			if c.total > c.maxTotal {
				return false, grpcStatus(server.TooLarge(c.maxTotal))
			}
			c.cur, c.last = part.Chunk.GetData(), part.Chunk.GetEndOfInstance()
			if len(c.cur) > 0 || c.last {
				return true, nil
			}
		default:
			return false, grpcStatus(midsag.Rejectf(midsag.ReasonBadRequest, "message %d has neither options nor a chunk", c.n))
		}
	}
	return false, nil
}

// next reports whether another instance follows, having read its first
// chunk.
func (c *chunkReader) next() (bool, error) {
	if len(c.cur) > 0 {
		return true, nil
	}
	ok, err := c.recv()
	if c.opts == nil {
		c.opts = &midsagv1.ScoreOptions{}
	}
	return ok, err
}

// Read returns the current instance's bytes; io.EOF at its end.
func (c *chunkReader) Read(p []byte) (int, error) {
	for len(c.cur) == 0 {
		if c.last || c.eof {
			c.last = false
			return 0, io.EOF
		}
		ok, err := c.recv()
		if err != nil {
			c.err = err
			return 0, err
		}
		if !ok {
			return 0, io.EOF
		}
	}
	n := copy(p, c.cur)
	c.cur = c.cur[n:]
	if len(c.cur) == 0 && c.last {
		// The next Read reports the end; the next instance starts afresh.
		c.cur = nil
	}
	return n, nil
}

// ingester receives the instances of one request into the spool, then
// stores them all; it remembers their SOP Instance UIDs, in arrival
// order, for the Score call.
type ingester struct {
	backend server.Backend
	origin  server.Origin
	staged  []*server.Staged
	uids    []string
	// held are the studies this request keeps from settling, with their
	// release functions, until it ends.
	held map[string]func()
}

// receive streams one instance into the spool; name says which part of
// the request it was (never a file name in logs: those can hold patient
// names).
func (g *ingester) receive(ctx context.Context, name string, r io.Reader, limit int64) error {
	st, err := g.backend.Receive(ctx, g.origin, r, limit)
	if err != nil {
		st.Abort()
		return prefixed(name, err)
	}
	g.staged = append(g.staged, st)
	if g.held == nil {
		g.held = map[string]func(){}
	}
	if _, ok := g.held[st.StudyInstanceUID]; !ok {
		g.held[st.StudyInstanceUID] = g.backend.Hold(st.StudyInstanceUID)
	}
	return nil
}

// receiveSource receives one source, such as a zip entry.
func (g *ingester) receiveSource(ctx context.Context, name string, src midsag.Source) error {
	rc, err := src.Open()
	if err != nil {
		return prefixed(name, err)
	}
	defer rc.Close()
	return g.receive(ctx, name, rc, 0)
}

// commit stores every staged instance, once they are known to be of one
// study (Score would refuse more after they were stored).
func (g *ingester) commit(ctx context.Context) error {
	studies := map[string]bool{}
	for _, st := range g.staged {
		studies[st.StudyInstanceUID] = true
	}
	if len(studies) > 1 {
		return midsag.Rejectf(midsag.ReasonMultipleStudies, "the request holds %d studies; send one study at a time", len(studies))
	}
	for i, st := range g.staged {
		stored, err := g.backend.Commit(ctx, st)
		if err != nil {
			return prefixed(fmt.Sprintf("instance %d", i+1), err)
		}
		g.uids = append(g.uids, stored.SOPInstanceUID)
	}
	g.staged = nil
	return nil
}

// abort discards what was staged and not stored and lets the request's
// studies settle; the handler defers it.
func (g *ingester) abort() {
	for _, st := range g.staged {
		st.Abort()
	}
	g.staged = nil
	for _, release := range g.held {
		release()
	}
	g.held = nil
}

// prefixed names the part of a request an error is about: a refusal gets
// it as its "source" detail; other errors are wrapped.
func prefixed(name string, err error) error {
	if e := midsag.RefusalOf(err); e != nil {
		return e.WithDetail("source", name)
	}
	return fmt.Errorf("%s: %w", name, err)
}

// score asks the Backend to score uids as one study and converts the
// record. A synchronous call whose record came back rejected is reported
// as that refusal, so a 200 or OK always means a finished result.
func score(ctx context.Context, b server.Backend, uids []string, opts *midsagv1.ScoreOptions) (*midsagv1.Result, error) {
	if len(uids) == 0 {
		return nil, midsag.Rejectf(midsag.ReasonNoInput, "the request holds no DICOM instance")
	}
	rec, err := b.Score(ctx, server.ScoreRequest{
		SOPInstanceUIDs: uids,
		Model:           opts.GetModel(),
		ModelVersion:    opts.GetModelVersion(),
		Explain:         opts.GetExplain(),
		Async:           opts.GetAsync(),
	})
	if err != nil {
		return nil, err
	}
	if !opts.GetAsync() && rec.Status == server.StatusRejected {
		return nil, &midsag.Error{Reason: midsag.Reason(rec.Reason), Msg: rec.Message}
	}
	if !opts.GetAsync() && rec.Status == server.StatusFailed {
		return nil, midsag.Reject(midsag.ReasonInternal, "scoring failed", fmt.Errorf("result %s failed: %s", rec.ID, rec.Message))
	}
	return ResultProto(rec)
}
