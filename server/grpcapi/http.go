package grpcapi

import (
	"context"
	"fmt"
	"net/http"
	"strconv"
	"strings"
	"time"

	"github.com/grpc-ecosystem/grpc-gateway/v2/runtime"
	"google.golang.org/protobuf/encoding/protojson"

	"github.com/midsag/midsag"
	midsagv1 "github.com/midsag/midsag/api/midsag/v1"
	"github.com/midsag/midsag/server"
	"github.com/midsag/midsag/server/stowrs"
)

// openPaths never need a token: probes and the metrics scraper.
var openPaths = map[string]bool{"/healthz": true, "/readyz": true, "/metrics": true}

// httpAPI holds what the hand-written HTTP handlers share.
type httpAPI struct {
	cfg    Config
	tokens tokens
}

// NewHTTPHandler returns one handler for the REST API: the gateway routes
// GET /v1/results/{result_id}, GET /v1/results and GET /v1/models (served
// in-process), POST /v1/studies:score, STOW-RS POST /dicomweb/studies and
// /dicomweb/studies/{study}, GET /openapi.json, and the extra handlers by
// their http.ServeMux pattern (the caller's /healthz, /readyz, /metrics,
// which need no token). Unknown paths get a JSON 404.
func NewHTTPHandler(ctx context.Context, cfg Config, extra map[string]http.Handler) (http.Handler, error) {
	cfg, err := cfg.withDefaults()
	if err != nil {
		return nil, err
	}
	a := &httpAPI{cfg: cfg, tokens: newTokens(cfg.Tokens)}

	gw := runtime.NewServeMux(
		runtime.WithMarshalerOption(runtime.MIMEWildcard, &runtime.JSONPb{
			MarshalOptions:   resultJSON,
			UnmarshalOptions: protojson.UnmarshalOptions{DiscardUnknown: true},
		}),
		runtime.WithErrorHandler(func(_ context.Context, _ *runtime.ServeMux, _ runtime.Marshaler, w http.ResponseWriter, _ *http.Request, err error) {
			server.WriteError(w, cfg.Logger, fromStatus(err))
		}),
	)
	if err := midsagv1.RegisterStudyScoringHandlerServer(ctx, gw, &service{cfg: cfg}); err != nil {
		return nil, fmt.Errorf("register gateway: %w", err)
	}

	stow := stowrs.Handler(stowrs.Config{Backend: cfg.Backend, MaxBodyBytes: cfg.MaxBodyBytes, Limits: cfg.Limits, Logger: cfg.Logger,
		ReadIdle: cfg.ReadIdle, MinReadRate: cfg.MinReadRate})
	mux := http.NewServeMux()
	routes := map[string]http.Handler{
		"GET /v1/results/{result_id}":             gw,
		"GET /v1/results/{result_id}/heatmap.png": http.HandlerFunc(a.heatmap),
		"GET /v1/results":                         gw,
		"GET /v1/models":                          gw,
		"POST /v1/studies:score":                  http.HandlerFunc(a.score),
		"POST /dicomweb/studies":                  stow,
		"POST /dicomweb/studies/{study}":          stow,
		"GET /openapi.json":                       http.HandlerFunc(serveOpenAPI),
		"/":                                       http.HandlerFunc(a.notFound),
	}
	for pattern, h := range routes {
		mux.Handle(pattern, a.tokens.wrap(a, h))
	}
	for pattern, h := range extra {
		if _, taken := routes[pattern]; taken {
			return nil, fmt.Errorf("extra handler %q collides with an API route", pattern)
		}
		if !openPaths[patternPath(pattern)] {
			h = a.tokens.wrap(a, h)
		}
		mux.Handle(pattern, h)
	}
	return a.observe(mux), nil
}

// patternPath strips the method and host from a ServeMux pattern.
func patternPath(pattern string) string {
	if _, rest, ok := strings.Cut(pattern, " "); ok {
		pattern = strings.TrimSpace(rest)
	}
	if i := strings.Index(pattern, "/"); i > 0 {
		pattern = pattern[i:]
	}
	return pattern
}

func serveOpenAPI(w http.ResponseWriter, _ *http.Request) {
	server.WriteBytes(w, http.StatusOK, "application/json", midsagv1.OpenAPI)
}

func (a *httpAPI) notFound(w http.ResponseWriter, r *http.Request) {
	server.WriteError(w, a.cfg.Logger, midsag.Rejectf(midsag.ReasonNotFound, "no route for %s %s", r.Method, r.URL.Path))
}

// observe logs each request and reports it to Config.Observe under its
// route pattern (set by the ServeMux), so result ids and study UIDs do not
// become metric labels.
func (a *httpAPI) observe(next http.Handler) http.Handler {
	return http.HandlerFunc(func(w http.ResponseWriter, r *http.Request) {
		start := time.Now()
		rec := &statusRecorder{ResponseWriter: w, code: http.StatusOK}
		next.ServeHTTP(rec, r)
		d := time.Since(start)
		endpoint := r.Pattern
		if endpoint == "" {
			endpoint = "unmatched"
		}
		if a.cfg.Observe != nil {
			a.cfg.Observe(endpoint, rec.code, d)
		}
		a.cfg.Logger.Info("http request", "method", r.Method, "endpoint", endpoint, "status", rec.code,
			"bytes_in", r.ContentLength, "duration_ms", float64(d.Microseconds())/1000)
	})
}

// statusRecorder remembers the status code written through it.
type statusRecorder struct {
	http.ResponseWriter
	code  int
	wrote bool
}

func (s *statusRecorder) WriteHeader(code int) {
	if !s.wrote {
		s.code, s.wrote = code, true
	}
	s.ResponseWriter.WriteHeader(code)
}

func (s *statusRecorder) Write(b []byte) (int, error) {
	s.wrote = true
	return s.ResponseWriter.Write(b)
}

// Unwrap lets http.ResponseController reach the connection (flush,
// deadlines) through the recorder.
func (s *statusRecorder) Unwrap() http.ResponseWriter { return s.ResponseWriter }

// heatmap serves GET /v1/results/{result_id}/heatmap.png: the occlusion
// map picture of an explained result (404 not_found otherwise).
func (a *httpAPI) heatmap(w http.ResponseWriter, r *http.Request) {
	b, err := a.cfg.Backend.Artifact(r.Context(), r.PathValue("result_id"), server.HeatmapPNG)
	if err != nil {
		server.WriteError(w, a.cfg.Logger, server.Classify(err))
		return
	}
	w.Header().Set("Content-Type", "image/png")
	w.Header().Set("Content-Length", strconv.Itoa(len(b)))
	w.Write(b)
}
