package grpcapi

import (
	"context"
	"fmt"
	"strings"
	"time"

	"google.golang.org/grpc"
	"google.golang.org/grpc/health"
	healthpb "google.golang.org/grpc/health/grpc_health_v1"
	"google.golang.org/grpc/reflection"
	"google.golang.org/grpc/status"

	"github.com/midsag/midsag"
	midsagv1 "github.com/midsag/midsag/api/midsag/v1"
)

// healthPrefix is the gRPC health service, open without a token so
// orchestrators can probe it (like /healthz).
const healthPrefix = "/grpc.health.v1.Health/"

// NewGRPCServer returns a gRPC server with the StudyScoring service,
// server reflection and the grpc.health.v1 service reporting SERVING.
// opts are appended after midsag's own interceptors (auth, logging,
// Observe).
func NewGRPCServer(cfg Config, opts ...grpc.ServerOption) (*grpc.Server, error) {
	cfg, err := cfg.withDefaults()
	if err != nil {
		return nil, err
	}
	g := &grpcMiddleware{cfg: cfg, tokens: newTokens(cfg.Tokens)}
	all := append([]grpc.ServerOption{
		grpc.ChainUnaryInterceptor(g.unary),
		grpc.ChainStreamInterceptor(g.stream),
	}, opts...)
	gs := grpc.NewServer(all...)
	midsagv1.RegisterStudyScoringServer(gs, &service{cfg: cfg})
	reflection.Register(gs)
	hs := health.NewServer()
	hs.SetServingStatus("", healthpb.HealthCheckResponse_SERVING)
	hs.SetServingStatus(midsagv1.StudyScoring_ServiceDesc.ServiceName, healthpb.HealthCheckResponse_SERVING)
	healthpb.RegisterHealthServer(gs, hs)
	return gs, nil
}

// grpcMiddleware authenticates, logs and observes every call.
type grpcMiddleware struct {
	cfg    Config
	tokens tokens
}

func (g *grpcMiddleware) check(ctx context.Context, method string) error {
	if strings.HasPrefix(method, healthPrefix) || g.tokens.acceptsContext(ctx) {
		return nil
	}
	return grpcStatus(midsag.Rejectf(midsag.ReasonUnauthenticated, `a bearer token is required (metadata "authorization: Bearer TOKEN")`))
}

func (g *grpcMiddleware) done(method string, start time.Time, err error) {
	d := time.Since(start)
	code := status.Code(err)
	if g.cfg.Observe != nil {
		g.cfg.Observe(method, int(code), d)
	}
	g.cfg.Logger.Info("grpc call", "method", method, "code", code.String(),
		"duration_ms", float64(d.Microseconds())/1000, "error", errText(err))
}

func (g *grpcMiddleware) unary(ctx context.Context, req any, info *grpc.UnaryServerInfo, h grpc.UnaryHandler) (resp any, err error) {
	start := time.Now()
	defer func() {
		if p := recover(); p != nil {
			err = grpcStatus(fmt.Errorf("panic in %s: %v", info.FullMethod, p))
		}
		g.done(info.FullMethod, start, err)
	}()
	if err := g.check(ctx, info.FullMethod); err != nil {
		return nil, err
	}
	return h(ctx, req)
}

func (g *grpcMiddleware) stream(srv any, ss grpc.ServerStream, info *grpc.StreamServerInfo, h grpc.StreamHandler) (err error) {
	start := time.Now()
	defer func() {
		if p := recover(); p != nil {
			err = grpcStatus(fmt.Errorf("panic in %s: %v", info.FullMethod, p))
		}
		g.done(info.FullMethod, start, err)
	}()
	if err := g.check(ss.Context(), info.FullMethod); err != nil {
		return err
	}
	return h(srv, ss)
}

// errText is err's message for a log line ("" for none). Status messages
// hold reason codes and UIDs, never patient data.
func errText(err error) string {
	if err == nil {
		return ""
	}
	return status.Convert(err).Message()
}
