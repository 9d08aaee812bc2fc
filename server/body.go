package server

import (
	"errors"
	"io"
	"net/http"
	"os"
	"time"

	"github.com/midsag/midsag"
)

// BodyLimits bound how an HTTP request body is read.
type BodyLimits struct {
	// MaxBytes bounds the body (http.MaxBytesReader); 0 leaves it unbound.
	MaxBytes int64
	// Idle is how long a body may bring nothing before it is closed, and
	// the window over which MinRate is measured; 0 means DefaultReadIdle.
	Idle time.Duration
	// MinRate is the fewest bytes per second a body must bring over each
	// Idle window; 0 means DefaultMinRate, negative none.
	MinRate int64
}

// DefaultReadIdle and DefaultMinRate close an upload that stalls for 20 s
// or brings less than 1 KiB/s over 20 s: a hospital network moves
// megabytes a second, and a client that is this slow holds a spool file
// and a connection for nothing. Our choice.
const (
	DefaultReadIdle       = 20 * time.Second
	DefaultMinRate  int64 = 1 << 10
)

// Body is a request body read within BodyLimits. Call Done once the body
// is read: it clears the connection's read deadline, so a long scoring
// call after the upload is not cut off by it.
type Body struct {
	r     io.Reader
	rc    *http.ResponseController
	lim   BodyLimits
	start time.Time
	n     int64
	err   error
}

// NewBody bounds r's body by lim, through read deadlines set on the
// connection (http.ResponseController): a body that brings nothing for
// lim.Idle, or less than lim.MinRate bytes per second over a window of
// lim.Idle, fails with a truncated refusal and the connection is closed.
func NewBody(w http.ResponseWriter, r *http.Request, lim BodyLimits) *Body {
	if lim.Idle <= 0 {
		lim.Idle = DefaultReadIdle
	}
	if lim.MinRate == 0 {
		lim.MinRate = DefaultMinRate
	}
	var body io.Reader = r.Body
	if lim.MaxBytes > 0 {
		body = http.MaxBytesReader(w, r.Body, lim.MaxBytes)
	}
	return &Body{r: body, rc: http.NewResponseController(w), lim: lim, start: time.Now()}
}

// Read reads the body, refusing a stalled or too slow one.
func (b *Body) Read(p []byte) (int, error) {
	if b.err != nil {
		return 0, b.err
	}
	now := time.Now()
	if now.Sub(b.start) >= b.lim.Idle {
		if b.lim.MinRate > 0 && b.n < b.lim.MinRate*int64(b.lim.Idle/time.Second) {
			b.err = midsag.Rejectf(midsag.ReasonTruncated, "the upload brought %d bytes in %s, less than %d bytes per second; closed",
				b.n, b.lim.Idle, b.lim.MinRate)
			return 0, b.err
		}
		b.start, b.n = now, 0
	}
	// A writer that cannot set deadlines (a test recorder) is read
	// without them.
	_ = b.rc.SetReadDeadline(now.Add(b.lim.Idle))
	n, err := b.r.Read(p)
	b.n += int64(n)
	if errors.Is(err, os.ErrDeadlineExceeded) {
		b.err = midsag.Reject(midsag.ReasonTruncated, "nothing arrived for "+b.lim.Idle.String()+"; the upload was closed", err)
		return n, b.err
	}
	if err != nil && b.err == nil && !errors.Is(err, io.EOF) {
		b.err = err
	}
	return n, err
}

// Done clears the read deadline once the body has been read.
func (b *Body) Done() { _ = b.rc.SetReadDeadline(time.Time{}) }
