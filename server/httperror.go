package server

import (
	"context"
	"encoding/json"
	"errors"
	"fmt"
	"log/slog"
	"net/http"

	"github.com/midsag/midsag"
	"github.com/midsag/midsag/server/store"
)

// The HTTP side of the one refusal vocabulary, shared by the REST API and
// STOW-RS: every error becomes a *midsag.Error (Classify) and is written
// as the JSON refusal body with the status ReasonTable gives its reason.

// Classify turns any error from the Backend or from request handling into
// a *midsag.Error. Refusals keep their reason, message and details;
// unknown errors become internal, their text kept as the cause for the
// log.
func Classify(err error) *midsag.Error {
	// A body cut off at MaxBodyBytes is too large, also where a reader
	// reported the cut as a malformed body.
	var mbe *http.MaxBytesError
	if errors.As(err, &mbe) {
		return TooLarge(mbe.Limit)
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

// SentMessage is what a client is told: the message with its cause for a
// refusal; for a failure (server.Mapping.Fault) the message alone, as the
// cause may name files or internals.
func SentMessage(e *midsag.Error) string {
	if MappingOf(e.Reason).Fault {
		return e.Msg
	}
	return e.Message()
}

// LogCause logs the cause of a failure, which the client is not sent.
func LogCause(log *slog.Logger, e *midsag.Error) {
	if e.Err != nil && SentMessage(e) == e.Msg {
		log.Error("request failed", "reason", e.Reason, "err", e.Err)
	}
}

// overloadRetryAfter is the Retry-After (seconds) sent with 429: about
// the time one study takes to score on two cores. Our choice.
const overloadRetryAfter = "5"

// WriteError writes e as the JSON error body with its HTTP status from
// ReasonTable, and logs the causes of failures.
func WriteError(w http.ResponseWriter, log *slog.Logger, e *midsag.Error) {
	LogCause(log, e)
	if e.Reason == midsag.ReasonOverloaded {
		w.Header().Set("Retry-After", overloadRetryAfter)
	}
	WriteJSON(w, HTTPStatus(e.Reason), "application/json", midsag.NewRefusalBody(e, SentMessage(e)))
}

// TooLarge is the refusal for an upload beyond the configured limit.
func TooLarge(limit int64) *midsag.Error {
	return midsag.Rejectf(midsag.ReasonTooLarge, "the upload is larger than the %d-byte limit", limit)
}

// WriteJSON encodes v fully before writing, so a marshalling failure never
// leaves a half-written body.
func WriteJSON(w http.ResponseWriter, code int, contentType string, v any) {
	b, err := json.Marshal(v)
	if err != nil {
		WriteBytes(w, http.StatusInternalServerError, "application/json",
			fmt.Appendf(nil, `{"error":{"reason":%q,"message":"encode response"}}`+"\n", midsag.ReasonInternal))
		return
	}
	WriteBytes(w, code, contentType, append(b, '\n'))
}

// WriteBytes writes a whole response body with its status and type.
func WriteBytes(w http.ResponseWriter, code int, contentType string, b []byte) {
	w.Header().Set("Content-Type", contentType)
	w.WriteHeader(code)
	_, _ = w.Write(b) // the client may have gone; nothing left to do
}
