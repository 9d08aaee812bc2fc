package grpcapi

import (
	"context"
	"errors"
	"io"
	"net"
	"testing"
	"time"

	"google.golang.org/genproto/googleapis/rpc/errdetails"
	"google.golang.org/grpc"
	"google.golang.org/grpc/codes"
	"google.golang.org/grpc/credentials/insecure"
	healthpb "google.golang.org/grpc/health/grpc_health_v1"
	"google.golang.org/grpc/metadata"
	reflectpb "google.golang.org/grpc/reflection/grpc_reflection_v1"
	"google.golang.org/grpc/status"
	"google.golang.org/grpc/test/bufconn"

	"github.com/midsag/midsag"
	midsagv1 "github.com/midsag/midsag/api/midsag/v1"
	"github.com/midsag/midsag/phantom"
)

// dialGRPC serves cfg on an in-memory listener and returns a real
// grpc-go client connection to it.
func dialGRPC(t *testing.T, cfg Config) *grpc.ClientConn {
	t.Helper()
	gs, err := NewGRPCServer(cfg)
	if err != nil {
		t.Fatal(err)
	}
	lis := bufconn.Listen(1 << 20)
	go gs.Serve(lis)
	t.Cleanup(gs.Stop)
	cc, err := grpc.NewClient("passthrough:///bufnet",
		grpc.WithContextDialer(func(context.Context, string) (net.Conn, error) { return lis.Dial() }),
		grpc.WithTransportCredentials(insecure.NewCredentials()))
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() { cc.Close() })
	return cc
}

// sendStudy streams files as ScoreStudy chunks of chunk bytes.
func sendStudy(ctx context.Context, c midsagv1.StudyScoringClient, opts *midsagv1.ScoreOptions, files []phantom.File, chunk int) (*midsagv1.ScoreStudyResponse, error) {
	st, err := c.ScoreStudy(ctx)
	if err != nil {
		return nil, err
	}
	reqs := []*midsagv1.ScoreStudyRequest{{Part: &midsagv1.ScoreStudyRequest_Options{Options: opts}}}
	for _, f := range files {
		for off := 0; off < len(f.Data); off += chunk {
			end := min(off+chunk, len(f.Data))
			msg := &midsagv1.InstanceChunk{Data: f.Data[off:end], EndOfInstance: end == len(f.Data)}
			reqs = append(reqs, &midsagv1.ScoreStudyRequest{Part: &midsagv1.ScoreStudyRequest_Chunk{Chunk: msg}})
		}
	}
	for _, req := range reqs {
		if err := st.Send(req); err != nil {
			// io.EOF means the server ended the stream, possibly before
			// the first message arrived (a refused token); its status
			// comes from the receive side (grpc-go ClientStream.SendMsg).
			if errors.Is(err, io.EOF) {
				return st.CloseAndRecv()
			}
			return nil, err
		}
	}
	return st.CloseAndRecv()
}

func TestGRPCScoreStudyStreamed(t *testing.T) {
	files := phantomStudy(t)
	fake := newFake()
	c := midsagv1.NewStudyScoringClient(dialGRPC(t, Config{Backend: fake}))
	ctx, cancel := context.WithTimeout(context.Background(), 20*time.Second)
	defer cancel()

	resp, err := sendStudy(ctx, c, &midsagv1.ScoreOptions{Model: "midsag-demo"}, files, 64<<10)
	if err != nil {
		t.Fatal(err)
	}
	res := resp.GetResult()
	if res.GetStatus() != "done" || res.GetDecision() != "compression" || res.GetResultId() == "" || len(res.GetSlices()) != 1 {
		t.Fatalf("result %v", res)
	}
	ingested, _ := fake.counts()
	if ingested != len(files) || len(scoresOf(fake)[0].SOPInstanceUIDs) != len(files) || originsOf(fake)[0].Listener != "grpc" {
		t.Fatalf("ingested %d of %d; score %+v", ingested, len(files), scoresOf(fake)[0])
	}
	for i, f := range files {
		// Each instance was reassembled byte for byte: the fake parsed it
		// and its UID is the one the phantom wrote (order preserved).
		if scoresOf(fake)[0].SOPInstanceUIDs[i] != ingestedOf(fake)[i].SOPInstanceUID || len(f.Data) < 64<<10 {
			t.Fatalf("instance %d: uid order or size (%d bytes) wrong", i, len(f.Data))
		}
	}

	got, err := c.GetResult(ctx, &midsagv1.GetResultRequest{ResultId: res.GetResultId()})
	if err != nil || got.GetProbability() != res.GetProbability() {
		t.Fatalf("GetResult: %v %v", got, err)
	}
	_, err = c.GetResult(ctx, &midsagv1.GetResultRequest{ResultId: "nope"})
	wantStatus(t, err, codes.NotFound, midsag.ReasonNotFound)

	// A refusal from the Backend keeps its reason: code from
	// server.GRPCCode, reason in the message and in ErrorInfo.
	fake.setScoreErr(midsag.Rejectf(midsag.ReasonOverloaded, "queue full"))
	_, err = sendStudy(ctx, c, &midsagv1.ScoreOptions{}, files[:1], 64<<10)
	wantStatus(t, err, codes.ResourceExhausted, midsag.ReasonOverloaded)

	// A stream without instances, and one over the size limit.
	_, err = sendStudy(ctx, c, &midsagv1.ScoreOptions{}, nil, 64<<10)
	wantStatus(t, err, codes.InvalidArgument, midsag.ReasonNoInput)

	// A refused instance is named in the ErrorInfo metadata (AIP-193, from memory:
	// ErrorInfo carries the machine-readable reason and its context), so
	// a client learns which one without parsing the message.
	fake.setScoreErr(nil)
	_, err = sendStudy(ctx, c, &midsagv1.ScoreOptions{}, []phantom.File{{Name: "junk", Data: []byte("not DICOM")}}, 64<<10)
	wantStatus(t, err, codes.InvalidArgument, midsag.ReasonNotDICOM)
	if info := errorInfo(err); info.GetMetadata()["source"] != "instance 1" {
		t.Errorf("ErrorInfo metadata %v, want source \"instance 1\"", info.GetMetadata())
	}
}

// errorInfo returns the ErrorInfo detail of a gRPC status error, or nil.
func errorInfo(err error) *errdetails.ErrorInfo {
	for _, d := range status.Convert(err).Details() {
		if i, ok := d.(*errdetails.ErrorInfo); ok {
			return i
		}
	}
	return nil
}

func TestGRPCStreamLimit(t *testing.T) {
	files := phantomStudy(t)
	fake := newFake()
	c := midsagv1.NewStudyScoringClient(dialGRPC(t, Config{Backend: fake, MaxBodyBytes: int64(len(files[0].Data)) + 100}))
	_, err := sendStudy(context.Background(), c, &midsagv1.ScoreOptions{}, files[:2], 64<<10)
	wantStatus(t, err, codes.InvalidArgument, midsag.ReasonTooLarge)
	if _, scores := fake.counts(); scores != 0 {
		t.Error("an oversized stream was scored")
	}
}

func wantStatus(t *testing.T, err error, code codes.Code, reason midsag.Reason) {
	t.Helper()
	st := status.Convert(err)
	if st.Code() != code {
		t.Fatalf("code %v (%v), want %v", st.Code(), err, code)
	}
	info := errorInfo(err)
	if info == nil || info.GetReason() != string(reason) || info.GetDomain() != "midsag" {
		t.Errorf("ErrorInfo %v, want reason %s domain midsag", info, reason)
	}
	if want := string(reason) + ": "; len(st.Message()) < len(want) || st.Message()[:len(want)] != want {
		t.Errorf("message %q does not start with %q", st.Message(), want)
	}
}

func TestGRPCAuthHealthReflection(t *testing.T) {
	fake := newFake()
	cc := dialGRPC(t, Config{Backend: fake, Tokens: []string{"s3cret"}})
	ctx, cancel := context.WithTimeout(context.Background(), 10*time.Second)
	defer cancel()
	c := midsagv1.NewStudyScoringClient(cc)

	_, err := c.ListModels(ctx, &midsagv1.ListModelsRequest{})
	wantStatus(t, err, codes.Unauthenticated, midsag.ReasonUnauthenticated)
	_, err = sendStudy(ctx, c, &midsagv1.ScoreOptions{}, nil, 1)
	wantStatus(t, err, codes.Unauthenticated, midsag.ReasonUnauthenticated)
	bad := metadata.AppendToOutgoingContext(ctx, "authorization", "Bearer nope")
	_, err = c.ListModels(bad, &midsagv1.ListModelsRequest{})
	wantStatus(t, err, codes.Unauthenticated, midsag.ReasonUnauthenticated)

	authed := metadata.AppendToOutgoingContext(ctx, "authorization", "Bearer s3cret")
	models, err := c.ListModels(authed, &midsagv1.ListModelsRequest{})
	if err != nil || len(models.GetModels()) != 1 {
		t.Fatalf("ListModels: %v %v", models, err)
	}

	// grpc.health.v1 answers without a token.
	h, err := healthpb.NewHealthClient(cc).Check(ctx, &healthpb.HealthCheckRequest{Service: "midsag.v1.StudyScoring"})
	if err != nil || h.GetStatus() != healthpb.HealthCheckResponse_SERVING {
		t.Fatalf("health: %v %v", h, err)
	}

	// Server reflection (grpc.reflection.v1) lists the service.
	rc, err := reflectpb.NewServerReflectionClient(cc).ServerReflectionInfo(authed)
	if err != nil {
		t.Fatal(err)
	}
	if err := rc.Send(&reflectpb.ServerReflectionRequest{MessageRequest: &reflectpb.ServerReflectionRequest_ListServices{}}); err != nil {
		t.Fatal(err)
	}
	resp, err := rc.Recv()
	if err != nil {
		t.Fatal(err)
	}
	found := false
	for _, s := range resp.GetListServicesResponse().GetService() {
		found = found || s.GetName() == "midsag.v1.StudyScoring"
	}
	if !found {
		t.Errorf("reflection lists %v", resp.GetListServicesResponse().GetService())
	}
}
