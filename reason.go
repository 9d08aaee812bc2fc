package midsag

import (
	"errors"
	"fmt"
	"maps"
)

// Reason is a machine-readable code for why an input or a request was
// refused, or why it failed. The same strings appear in CLI errors, HTTP
// bodies, gRPC status details and batch tables; they are a public
// contract (docs/ARCHITECTURE.md, README.md) and never change. Every code is declared
// here and listed by AllReasons; server.ReasonTable maps each to its HTTP
// status and gRPC code.
type Reason string

// Input refusals: the study or the files given cannot be scored.
const (
	// ReasonNoInput refuses a request or command with no input: no path,
	// an empty folder or body, a path that cannot be opened.
	ReasonNoInput Reason = "no_input"
	// ReasonNotDICOM refuses bytes that are not a DICOM Part 10 instance
	// (or a zip of them, or an accepted media type).
	ReasonNotDICOM Reason = "not_dicom"
	// ReasonTruncated refuses an instance or a body that ends early or is
	// malformed inside.
	ReasonTruncated Reason = "truncated"
	// ReasonTooLarge refuses an input beyond a size or count limit: an
	// element, an instance, an archive, an upload, a study.
	ReasonTooLarge Reason = "too_large"
	// ReasonUnsupportedSyntax refuses pixel data in a transfer syntax this
	// build cannot decode.
	ReasonUnsupportedSyntax Reason = "unsupported_transfer_syntax"
	// ReasonBadPixelData refuses pixel data that does not match its own
	// description (size, bits, frames) or cannot be decoded.
	ReasonBadPixelData Reason = "bad_pixel_data"
	// ReasonMultipleStudies refuses an input holding instances of more
	// than one study, or a STOW-RS part of another study than the URL's.
	ReasonMultipleStudies Reason = "multiple_studies"
	// ReasonSOPClassMismatch refuses a C-STORE whose dataset names another
	// SOP Class or SOP Instance than its command (PS3.4 B.2.3, A900).
	ReasonSOPClassMismatch Reason = "sop_class_mismatch"
	// ReasonNoSagittalT2 refuses a study with no series that passes as
	// T2-weighted sagittal; the refusal lists every candidate.
	ReasonNoSagittalT2 Reason = "no_sagittal_t2_series"
	// ReasonTooFewSlices refuses a series with fewer slices than the
	// model's stack needs.
	ReasonTooFewSlices Reason = "too_few_slices"
	// ReasonInconsistentGeometry refuses a series whose slices do not
	// share an orientation, spacing or size.
	ReasonInconsistentGeometry Reason = "inconsistent_geometry"
	// ReasonMidlineNotInSlab refuses a series whose slices do not hold the
	// patient's midsagittal plane, by the midline cues' evidence.
	ReasonMidlineNotInSlab Reason = "midline_not_in_slab"
	// ReasonIncompleteSeries refuses a series with slices missing inside
	// its slab: a gap along the slice normal that is a whole multiple of
	// the series' spacing. Slices missing only at an end are scored with
	// the quality flag series_incomplete instead.
	ReasonIncompleteSeries Reason = "incomplete_series"
	// ReasonDuplicateInstance refuses an input holding two instances with
	// the same SOP Instance UID (and frame) but different headers or pixel
	// data: the archive is inconsistent and either could be the right one.
	// Identical resends are dropped silently.
	ReasonDuplicateInstance Reason = "duplicate_instance"
	// ReasonUnreadable marks a file that could not be opened or read (a
	// permission or I/O error, a broken link), as opposed to one read and
	// refused. Batch discovery counts files by it.
	ReasonUnreadable Reason = "unreadable"
)

// Model refusals: the model named or given cannot score the study.
const (
	// ReasonModelInputMismatch refuses a study whose prepared stack does
	// not fit the model's declared input.
	ReasonModelInputMismatch Reason = "model_input_mismatch"
	// ReasonBadModel refuses a model file or manifest that cannot be used.
	ReasonBadModel Reason = "bad_model"
	// ReasonUnknownModel refuses a request naming a model (or version) the
	// registry does not hold.
	ReasonUnknownModel Reason = "unknown_model"
)

// Refusals of tables and shard outputs (calibrate, evaluate, merge).
const (
	// ReasonBadTable refuses a CSV table for evaluation or calibration: a
	// missing column, a value that is not a number, an unknown label.
	ReasonBadTable Reason = "bad_table"
	// ReasonMixedModels refuses to merge shards scored with different
	// models.
	ReasonMixedModels Reason = "mixed_models"
	// ReasonOverlappingStudies refuses to merge shards that share a study.
	ReasonOverlappingStudies Reason = "overlapping_studies"
)

// Request-level codes of the service: not about the study, but about the
// request or the service itself.
const (
	// ReasonOverloaded refuses a request because the job queue is full;
	// the client may retry later.
	ReasonOverloaded Reason = "overloaded"
	// ReasonBadRequest refuses a request whose parameters are malformed.
	ReasonBadRequest Reason = "bad_request"
	// ReasonNotFound answers a request for a result, artifact or route
	// that does not exist.
	ReasonNotFound Reason = "not_found"
	// ReasonUnauthenticated refuses a request without a known bearer
	// token where one is required.
	ReasonUnauthenticated Reason = "unauthenticated"
	// ReasonNotAcceptable refuses a request whose Accept header admits
	// no media type the route answers in.
	ReasonNotAcceptable Reason = "not_acceptable"
)

// Failures: nothing was wrong with the input; the service or the run
// failed. Their causes are logged, never sent.
const (
	// ReasonInternal is a service failure; the log has the cause.
	ReasonInternal Reason = "internal"
	// ReasonCorruptInstance fails a job one of whose stored instances no
	// longer matches the sha256 recorded when it was received (the disk
	// or someone changed the spool file), or is missing.
	ReasonCorruptInstance Reason = "corrupt_instance"
	// ReasonError is the reason of a batch row whose scoring failed (not
	// refused): its message column says more.
	ReasonError Reason = "error"
)

// AllReasons lists every reason code declared in this file, in
// declaration order. A test keeps it in step with the constants.
func AllReasons() []Reason {
	return []Reason{
		ReasonNoInput, ReasonNotDICOM, ReasonTruncated, ReasonTooLarge, ReasonUnsupportedSyntax,
		ReasonBadPixelData, ReasonMultipleStudies, ReasonSOPClassMismatch, ReasonNoSagittalT2, ReasonTooFewSlices,
		ReasonInconsistentGeometry, ReasonMidlineNotInSlab, ReasonIncompleteSeries,
		ReasonDuplicateInstance, ReasonUnreadable,
		ReasonModelInputMismatch, ReasonBadModel, ReasonUnknownModel,
		ReasonBadTable, ReasonMixedModels, ReasonOverlappingStudies,
		ReasonOverloaded, ReasonBadRequest, ReasonNotFound, ReasonUnauthenticated, ReasonNotAcceptable,
		ReasonInternal, ReasonCorruptInstance, ReasonError,
	}
}

// Error is a refusal or a failure with a reason code: the one error type
// every entry point reports and every transport converts.
type Error struct {
	Reason Reason
	// Msg is a sentence for a person, without the reason code.
	Msg string
	// Err is the underlying cause, if any. For failures (ReasonInternal)
	// it is logged and never sent to a client.
	Err error
	// Details are named facts about the refusal (such as "source", the
	// part of the input it is about), sent with it: in the JSON body's
	// "details" and the gRPC ErrorInfo metadata. Never patient data.
	Details map[string]string
	// Candidates, for series-picking refusals, lists every series with
	// its score and reasons so the refusal can be inspected.
	Candidates []SeriesCandidate
}

// Error returns "reason: message[: cause]".
func (e *Error) Error() string { return string(e.Reason) + ": " + e.Message() }

// Message returns the message and its cause, "message[: cause]": the
// error's text without the reason prefix, for bodies and CLI output that
// carry the reason on its own.
func (e *Error) Message() string {
	if e.Err != nil {
		return e.Msg + ": " + e.Err.Error()
	}
	return e.Msg
}

// Unwrap returns the underlying cause, if any.
func (e *Error) Unwrap() error { return e.Err }

// WithDetail returns a copy of e with the named detail set; e itself is
// not changed, as it may be shared.
func (e *Error) WithDetail(key, value string) *Error {
	c := *e
	c.Details = maps.Clone(e.Details)
	if c.Details == nil {
		c.Details = map[string]string{}
	}
	c.Details[key] = value
	return &c
}

// Rejectf returns an *Error with the given reason and formatted message.
func Rejectf(reason Reason, format string, args ...any) *Error {
	return &Error{Reason: reason, Msg: fmt.Sprintf(format, args...)}
}

// Reject returns an *Error with the given reason and message that wraps err.
func Reject(reason Reason, msg string, err error) *Error {
	return &Error{Reason: reason, Msg: msg, Err: err}
}

// RefusalOf returns the *Error anywhere in err's chain, or nil.
func RefusalOf(err error) *Error {
	var e *Error
	if errors.As(err, &e) {
		return e
	}
	return nil
}

// ReasonOf returns the reason code carried anywhere in err's chain.
func ReasonOf(err error) (Reason, bool) {
	var e *Error
	if errors.As(err, &e) {
		return e.Reason, true
	}
	return "", false
}

// RefusalBody is the JSON form of a refusal: on the CLI's stderr with
// --json and in every HTTP error body, so clients parse one shape.
type RefusalBody struct {
	Error  RefusalDetail `json:"error"`
	Notice string        `json:"notice"`
}

// RefusalDetail is the reason code, a sentence, the refusal's details,
// and for series-picking refusals every candidate series with its score
// and reasons.
type RefusalDetail struct {
	Reason           Reason            `json:"reason"`
	Message          string            `json:"message"`
	Details          map[string]string `json:"details,omitempty"`
	SeriesCandidates []SeriesCandidate `json:"series_candidates,omitempty"`
}

// NewRefusalBody returns the body of e with the research-use notice; msg
// is the sentence to send (e.Message(), or e.Msg alone for a failure
// whose cause stays in the log).
func NewRefusalBody(e *Error, msg string) RefusalBody {
	return RefusalBody{Error: RefusalDetail{Reason: e.Reason, Message: msg, Details: e.Details, SeriesCandidates: e.Candidates}, Notice: Notice}
}
