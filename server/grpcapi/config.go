package grpcapi

import (
	"errors"
	"log/slog"
	"time"

	"github.com/midsag/midsag"
	"github.com/midsag/midsag/server"
)

// DefaultMaxBodyBytes bounds one upload (an HTTP body or a ScoreStudy
// stream) when Config.MaxBodyBytes is zero: 1 GiB holds a large MR study
// (a few thousand 512x512 16-bit slices) with room to spare, while a
// runaway client is cut off before it fills the spool disk. Our choice.
const DefaultMaxBodyBytes int64 = 1 << 30

// Request-level reason codes. They are not input refusals (those are
// midsag.Reason constants) but share their vocabulary in error bodies.
const (
	// ReasonNotFound: the named result does not exist.
	ReasonNotFound midsag.Reason = "not_found"
	// ReasonUnauthenticated: a bearer token is required and was missing or
	// unknown.
	ReasonUnauthenticated midsag.Reason = "unauthenticated"
	// ReasonBadRequest: a parameter of the request is malformed.
	ReasonBadRequest midsag.Reason = "bad_request"
	// ReasonInternal: the service failed; the log has the cause.
	ReasonInternal midsag.Reason = "internal"
)

// Config configures both the gRPC server and the HTTP handler.
type Config struct {
	// Backend stores instances, scores studies and keeps results.
	Backend server.Backend
	// Pre reads each STOW-RS part's header before it is stored, so an
	// instance of another study than the URL's is refused unstored; it
	// may be lenient, as Ingest has the final word. NewHTTPHandler needs
	// it.
	Pre midsag.Preprocessor
	// MaxBodyBytes bounds one upload: an HTTP request body (Content-Length
	// or streamed size) or the total bytes of a ScoreStudy stream. Beyond
	// it the request is refused with too_large (HTTP 413). Zero means
	// DefaultMaxBodyBytes.
	MaxBodyBytes int64
	// Tokens are the accepted bearer tokens. Empty means no
	// authentication. /healthz, /readyz, /metrics and the gRPC health
	// service never need one.
	Tokens []string
	// Logger receives one line per request; nil discards.
	Logger *slog.Logger
	// Observe, when set, is called once per request with the endpoint (the
	// route pattern or the gRPC full method), the HTTP status or gRPC code,
	// and the duration.
	Observe func(endpoint string, code int, d time.Duration)
}

func (c Config) withDefaults() (Config, error) {
	if c.Backend == nil {
		return c, errors.New("grpcapi: Config.Backend is nil")
	}
	if c.MaxBodyBytes <= 0 {
		c.MaxBodyBytes = DefaultMaxBodyBytes
	}
	if c.Logger == nil {
		c.Logger = slog.New(slog.DiscardHandler)
	}
	return c, nil
}
