package grpcapi

import (
	"context"
	"encoding/json"
	"errors"
	"log/slog"
	"net/http"
	"strings"

	"google.golang.org/genproto/googleapis/rpc/errdetails"
	"google.golang.org/grpc/codes"
	"google.golang.org/grpc/status"

	"github.com/midsag/midsag"
	"github.com/midsag/midsag/server"
	"github.com/midsag/midsag/server/store"
)

// errorDomain is the ErrorInfo domain of every midsag gRPC error.
const errorDomain = "midsag"

// apiError is a failure as both transports report it.
type apiError struct {
	reason     midsag.Reason
	msg        string
	candidates []midsag.SeriesCandidate
	cause      error // logged, never sent: it may name files or internals
}

func (e *apiError) Error() string {
	if e.cause != nil {
		return string(e.reason) + ": " + e.msg + ": " + e.cause.Error()
	}
	return string(e.reason) + ": " + e.msg
}

func (e *apiError) Unwrap() error { return e.cause }

func newAPIError(reason midsag.Reason, msg string) *apiError {
	return &apiError{reason: reason, msg: msg}
}

// classify turns any error from the Backend or from request handling into
// an apiError. Refusals keep their reason and message; unknown errors
// become internal so their text stays in the log.
func classify(err error) *apiError {
	var ae *apiError
	if errors.As(err, &ae) {
		return ae
	}
	if e := midsag.RefusalOf(err); e != nil {
		msg := strings.Replace(err.Error(), string(e.Reason)+": ", "", 1)
		return &apiError{reason: e.Reason, msg: msg, candidates: e.Candidates}
	}
	var mbe *http.MaxBytesError
	switch {
	case errors.As(err, &mbe):
		return tooLarge(mbe.Limit)
	case errors.Is(err, store.ErrNotFound):
		return &apiError{reason: ReasonNotFound, msg: "no result with this id", cause: err}
	case errors.Is(err, context.Canceled), errors.Is(err, context.DeadlineExceeded):
		return &apiError{reason: ReasonInternal, msg: "the request was cancelled or timed out", cause: err}
	}
	return &apiError{reason: ReasonInternal, msg: "internal error", cause: err}
}

// httpStatus maps a reason to an HTTP status: the request-level codes here,
// refusals through server.HTTPStatus.
func httpStatus(r midsag.Reason) int {
	switch r {
	case ReasonNotFound:
		return http.StatusNotFound
	case ReasonUnauthenticated:
		return http.StatusUnauthorized
	case ReasonBadRequest:
		return http.StatusBadRequest
	case ReasonInternal:
		return http.StatusInternalServerError
	}
	return server.HTTPStatus(r)
}

// grpcCode maps a reason to a gRPC code, refusals through server.GRPCCode.
func grpcCode(r midsag.Reason) codes.Code {
	switch r {
	case ReasonNotFound:
		return codes.NotFound
	case ReasonUnauthenticated:
		return codes.Unauthenticated
	case ReasonBadRequest:
		return codes.InvalidArgument
	case ReasonInternal:
		return codes.Internal
	}
	return server.GRPCCode(r)
}

// reasonOfCode names a reason for a gRPC status that carries none (the
// gateway's own parameter errors, the transport's).
func reasonOfCode(c codes.Code) midsag.Reason {
	switch c {
	case codes.NotFound:
		return ReasonNotFound
	case codes.Unauthenticated:
		return ReasonUnauthenticated
	case codes.InvalidArgument, codes.OutOfRange:
		return ReasonBadRequest
	case codes.ResourceExhausted:
		return midsag.ReasonOverloaded
	}
	return ReasonInternal
}

// grpcStatus is the status a gRPC call returns for err: the code from the
// reason, "reason: message" as the message, and an ErrorInfo detail.
func grpcStatus(err error) error {
	ae := classify(err)
	st := status.New(grpcCode(ae.reason), string(ae.reason)+": "+ae.msg)
	if withInfo, derr := st.WithDetails(&errdetails.ErrorInfo{Reason: string(ae.reason), Domain: errorDomain}); derr == nil {
		st = withInfo
	}
	return st.Err()
}

// fromStatus recovers the apiError carried by a gRPC status error.
func fromStatus(err error) *apiError {
	st, ok := status.FromError(err)
	if !ok {
		return classify(err)
	}
	reason := reasonOfCode(st.Code())
	for _, d := range st.Details() {
		if info, ok := d.(*errdetails.ErrorInfo); ok && info.GetDomain() == errorDomain {
			reason = midsag.Reason(info.GetReason())
		}
	}
	return &apiError{reason: reason, msg: strings.TrimPrefix(st.Message(), string(reason)+": ")}
}

// overloadRetryAfter is the Retry-After (seconds) sent with 429: about
// the time one study takes to score on two cores. Our choice.
const overloadRetryAfter = "5"

// writeError writes ae as the JSON error body with its HTTP status, and
// logs internal causes.
func writeError(w http.ResponseWriter, log *slog.Logger, ae *apiError) {
	if ae.cause != nil {
		log.Error("request failed", "reason", ae.reason, "err", ae.cause)
	}
	body := midsag.NewRefusalBody(ae.reason, ae.msg, ae.candidates)
	if ae.reason == midsag.ReasonOverloaded {
		w.Header().Set("Retry-After", overloadRetryAfter)
	}
	writeJSON(w, httpStatus(ae.reason), "application/json", body)
}

// writeJSON encodes v fully before writing, so a marshalling failure never
// leaves a half-written body.
func writeJSON(w http.ResponseWriter, code int, contentType string, v any) {
	b, err := json.Marshal(v)
	if err != nil {
		writeBytes(w, http.StatusInternalServerError, "application/json",
			[]byte(`{"error":{"reason":"internal","message":"encode response"}}`+"\n"))
		return
	}
	writeBytes(w, code, contentType, append(b, '\n'))
}

func writeBytes(w http.ResponseWriter, code int, contentType string, b []byte) {
	w.Header().Set("Content-Type", contentType)
	w.WriteHeader(code)
	_, _ = w.Write(b) // the client may have gone; nothing left to do
}
