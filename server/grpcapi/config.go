package grpcapi

import (
	"errors"
	"log/slog"
	"time"

	"github.com/midsag/midsag/inputs"
	"github.com/midsag/midsag/server"
)

// DefaultMaxBodyBytes bounds one upload (an HTTP body or a ScoreStudy
// stream) when Config.MaxBodyBytes is zero: 1 GiB holds a large MR study
// (a few thousand 512x512 16-bit slices) with room to spare, while a
// runaway client is cut off before it fills the spool disk. Our choice.
const DefaultMaxBodyBytes int64 = 1 << 30

// Config configures both the gRPC server and the HTTP handler.
type Config struct {
	// Backend stores instances, scores studies and keeps results.
	Backend server.Backend
	// MaxBodyBytes bounds one upload: an HTTP request body (Content-Length
	// or streamed size) or the total bytes of a ScoreStudy stream. Beyond
	// it the request is refused with too_large (HTTP 413). Zero means
	// DefaultMaxBodyBytes.
	MaxBodyBytes int64
	// Limits bound the entries of an uploaded zip, the parts of a
	// multipart body and each instance (inputs.Limits); zero fields are
	// inputs.DefaultLimits.
	Limits inputs.Limits
	// ReadIdle and MinReadRate close an HTTP body that brings nothing for
	// ReadIdle or less than MinReadRate bytes per second over a window of
	// ReadIdle (server.BodyLimits); zero means server.DefaultReadIdle and
	// server.DefaultMinRate.
	ReadIdle    time.Duration
	MinReadRate int64
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
	c.Limits = c.Limits.OrDefault()
	if c.Logger == nil {
		c.Logger = slog.New(slog.DiscardHandler)
	}
	return c, nil
}
