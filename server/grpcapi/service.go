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

// ScoreStudy reassembles instances from the stream, ingests each as soon
// as it is complete, and scores them as one study when the stream closes.
func (s *service) ScoreStudy(stream midsagv1.StudyScoring_ScoreStudyServer) error {
	ctx := stream.Context()
	origin := server.Origin{Listener: "grpc"}
	if p, ok := peer.FromContext(ctx); ok && p.Addr != nil {
		origin.Remote = p.Addr.String()
	}
	ing := &ingester{backend: s.cfg.Backend, origin: origin}
	var (
		opts  = &midsagv1.ScoreOptions{}
		buf   []byte
		total int64
	)
	for n := 0; ; n++ {
		msg, err := stream.Recv()
		if errors.Is(err, io.EOF) {
			break
		}
		if err != nil {
			return err // the transport's own status
		}
		switch part := msg.GetPart().(type) {
		case *midsagv1.ScoreStudyRequest_Options:
			if n > 0 {
				return grpcStatus(midsag.Rejectf(midsag.ReasonBadRequest, "options may only be the first message of the stream"))
			}
			opts = part.Options
		case *midsagv1.ScoreStudyRequest_Chunk:
			total += int64(len(part.Chunk.GetData()))
			if total > s.cfg.MaxBodyBytes {
				return grpcStatus(server.TooLarge(s.cfg.MaxBodyBytes))
			}
			buf = append(buf, part.Chunk.GetData()...)
			if int64(len(buf)) > s.cfg.Limits.MaxEntryBytes {
				return grpcStatus(midsag.Rejectf(midsag.ReasonTooLarge, "instance %d is larger than the %d-byte limit",
					len(ing.uids)+1, s.cfg.Limits.MaxEntryBytes))
			}
			if part.Chunk.GetEndOfInstance() {
				if err := ing.ingest(ctx, fmt.Sprintf("instance %d", len(ing.uids)+1), buf); err != nil {
					return grpcStatus(err)
				}
				// Ingest may keep the slice; the next instance gets its own.
				buf = nil
			}
		default:
			return grpcStatus(midsag.Rejectf(midsag.ReasonBadRequest, "message %d has neither options nor a chunk", n+1))
		}
	}
	if len(buf) > 0 {
		if err := ing.ingest(ctx, fmt.Sprintf("instance %d", len(ing.uids)+1), buf); err != nil {
			return grpcStatus(err)
		}
	}
	res, err := score(ctx, s.cfg.Backend, ing.uids, opts)
	if err != nil {
		return grpcStatus(err)
	}
	return stream.SendAndClose(&midsagv1.ScoreStudyResponse{Result: res})
}

// ingester stores the instances of one request and remembers their SOP
// Instance UIDs, in arrival order, for the Score call.
type ingester struct {
	backend server.Backend
	origin  server.Origin
	uids    []string
}

// ingest stores one instance; name says which part of the request it was
// (never a file name in logs: those can hold patient names).
func (g *ingester) ingest(ctx context.Context, name string, data []byte) error {
	st, err := g.backend.Ingest(ctx, g.origin, data)
	if err != nil {
		return prefixed(name, err)
	}
	g.uids = append(g.uids, st.SOPInstanceUID)
	return nil
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
