package grpcapi

import (
	"context"
	"crypto/subtle"
	"net/http"
	"strings"

	"google.golang.org/grpc/metadata"

	"github.com/midsag/midsag"
	"github.com/midsag/midsag/server"
)

// tokens checks bearer tokens (RFC 6750 2.1) in constant time per token.
type tokens [][]byte

func newTokens(list []string) tokens {
	var t tokens
	for _, s := range list {
		if s != "" {
			t = append(t, []byte(s))
		}
	}
	return t
}

// required reports whether any token is configured.
func (t tokens) required() bool { return len(t) > 0 }

// accepts reports whether header, an Authorization value, names a token.
func (t tokens) accepts(header string) bool {
	if !t.required() {
		return true
	}
	scheme, tok, ok := strings.Cut(header, " ")
	if !ok || !strings.EqualFold(scheme, "Bearer") {
		return false
	}
	tok = strings.TrimSpace(tok)
	found := 0
	for _, want := range t {
		// Compare against every token so the time taken does not say
		// which one nearly matched.
		found |= subtle.ConstantTimeCompare([]byte(tok), want)
	}
	return found == 1
}

// acceptsContext checks the "authorization" metadata of a gRPC call.
func (t tokens) acceptsContext(ctx context.Context) bool {
	if !t.required() {
		return true
	}
	md, _ := metadata.FromIncomingContext(ctx)
	for _, v := range md.Get("authorization") {
		if t.accepts(v) {
			return true
		}
	}
	return false
}

// wrap refuses HTTP requests without an accepted token with 401 and the
// JSON error body.
func (t tokens) wrap(a *httpAPI, h http.Handler) http.Handler {
	if !t.required() {
		return h
	}
	return http.HandlerFunc(func(w http.ResponseWriter, r *http.Request) {
		if !t.accepts(r.Header.Get("Authorization")) {
			w.Header().Set("WWW-Authenticate", `Bearer realm="midsag"`) // RFC 6750 3
			server.WriteError(w, a.cfg.Logger, midsag.Rejectf(midsag.ReasonUnauthenticated, "a bearer token is required (Authorization: Bearer TOKEN)"))
			return
		}
		h.ServeHTTP(w, r)
	})
}
