package grpcapi

import (
	"context"
	"encoding/json"
	"errors"
	"fmt"
	"log/slog"
	"net/http"
	"strings"

	"google.golang.org/genproto/googleapis/rpc/errdetails"
	"google.golang.org/grpc/status"

	"github.com/midsag/midsag"
	"github.com/midsag/midsag/server"
	"github.com/midsag/midsag/server/store"
)

// errorDomain is the ErrorInfo domain of every midsag gRPC error.
const errorDomain = "midsag"

// classify turns any error from the Backend or from request handling into
// a *midsag.Error. Refusals keep their reason, message and details;
// unknown errors become internal, their text kept as the cause for the
// log.
func classify(err error) *midsag.Error {
	// A body cut off at MaxBodyBytes is too large, also where a reader
	// reported the cut as a malformed body.
	var mbe *http.MaxBytesError
	if errors.As(err, &mbe) {
		return tooLarge(mbe.Limit)
	}
	if e := midsag.RefusalOf(err); e != nil {
		return e
	}
	switch {
	case errors.Is(err, store.ErrNotFound):
		// The cause is store.ErrNotFound itself: nothing to log.
		return midsag.Rejectf(midsag.ReasonNotFound, "no result with this id")
	case errors.Is(err, context.Canceled), errors.Is(err, context.DeadlineExceeded):
		return midsag.Reject(midsag.ReasonInternal, "the request was cancelled or timed out", err)
	}
	return midsag.Reject(midsag.ReasonInternal, "internal error", err)
}

// sentMessage is what a client is told: the message with its cause for a
// refusal; for a failure (server.Mapping.Fault) the message alone, as the
// cause may name files or internals.
func sentMessage(e *midsag.Error) string {
	if server.MappingOf(e.Reason).Fault {
		return e.Msg
	}
	return e.Message()
}

// logCause logs the cause of a failure, which the client is not sent.
func logCause(log *slog.Logger, e *midsag.Error) {
	if e.Err != nil && sentMessage(e) == e.Msg {
		log.Error("request failed", "reason", e.Reason, "err", e.Err)
	}
}

// grpcStatus is the status a gRPC call returns for err: the code from
// server.ReasonTable, "reason: message" as the message, and an ErrorInfo
// detail with the reason and the refusal's details as metadata.
func grpcStatus(err error) error {
	e := classify(err)
	st := status.New(server.GRPCCode(e.Reason), string(e.Reason)+": "+sentMessage(e))
	info := &errdetails.ErrorInfo{Reason: string(e.Reason), Domain: errorDomain, Metadata: e.Details}
	if withInfo, derr := st.WithDetails(info); derr == nil {
		st = withInfo
	}
	return st.Err()
}

// fromStatus recovers the *midsag.Error carried by a gRPC status error.
func fromStatus(err error) *midsag.Error {
	st, ok := status.FromError(err)
	if !ok {
		return classify(err)
	}
	e := &midsag.Error{Reason: server.ReasonOfCode(st.Code())}
	for _, d := range st.Details() {
		if info, ok := d.(*errdetails.ErrorInfo); ok && info.GetDomain() == errorDomain {
			e.Reason = midsag.Reason(info.GetReason())
			e.Details = info.GetMetadata()
		}
	}
	// The status message is "reason: message" (grpcStatus); the reason is
	// carried apart, so only the message is kept.
	e.Msg = strings.TrimPrefix(st.Message(), string(e.Reason)+": ")
	return e
}

// overloadRetryAfter is the Retry-After (seconds) sent with 429: about
// the time one study takes to score on two cores. Our choice.
const overloadRetryAfter = "5"

// writeError writes e as the JSON error body with its HTTP status from
// server.ReasonTable, and logs the causes of failures.
func writeError(w http.ResponseWriter, log *slog.Logger, e *midsag.Error) {
	logCause(log, e)
	if e.Reason == midsag.ReasonOverloaded {
		w.Header().Set("Retry-After", overloadRetryAfter)
	}
	writeJSON(w, server.HTTPStatus(e.Reason), "application/json", midsag.NewRefusalBody(e, sentMessage(e)))
}

// tooLarge is the refusal for an upload beyond the configured limit.
func tooLarge(limit int64) *midsag.Error {
	return midsag.Rejectf(midsag.ReasonTooLarge, "the upload is larger than the %d-byte limit", limit)
}

// writeJSON encodes v fully before writing, so a marshalling failure never
// leaves a half-written body.
func writeJSON(w http.ResponseWriter, code int, contentType string, v any) {
	b, err := json.Marshal(v)
	if err != nil {
		writeBytes(w, http.StatusInternalServerError, "application/json",
			fmt.Appendf(nil, `{"error":{"reason":%q,"message":"encode response"}}`+"\n", midsag.ReasonInternal))
		return
	}
	writeBytes(w, code, contentType, append(b, '\n'))
}

func writeBytes(w http.ResponseWriter, code int, contentType string, b []byte) {
	w.Header().Set("Content-Type", contentType)
	w.WriteHeader(code)
	_, _ = w.Write(b) // the client may have gone; nothing left to do
}
