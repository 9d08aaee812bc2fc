package midsag

import (
	"errors"
	"fmt"
)

// Reason is a machine-readable code for why an input was refused. The same
// strings appear in CLI errors, HTTP bodies, gRPC status details and batch
// tables.
type Reason string

// Reason codes. The vocabulary is part of the public contract (DESIGN.md).
const (
	ReasonNoInput              Reason = "no_input"
	ReasonNotDICOM             Reason = "not_dicom"
	ReasonTruncated            Reason = "truncated"
	ReasonTooLarge             Reason = "too_large"
	ReasonUnsupportedSyntax    Reason = "unsupported_transfer_syntax"
	ReasonBadPixelData         Reason = "bad_pixel_data"
	ReasonMultipleStudies      Reason = "multiple_studies"
	ReasonNoSagittalT2         Reason = "no_sagittal_t2_series"
	ReasonTooFewSlices         Reason = "too_few_slices"
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
	ReasonDuplicateInstance  Reason = "duplicate_instance"
	ReasonModelInputMismatch Reason = "model_input_mismatch"
	ReasonBadModel           Reason = "bad_model"
	ReasonUnknownModel       Reason = "unknown_model"
	ReasonOverloaded         Reason = "overloaded"
	// ReasonBadTable refuses a CSV table for evaluation or calibration: a
	// missing column, a value that is not a number, an unknown label.
	ReasonBadTable Reason = "bad_table"
)

// Error is an input refusal: a reason code and a sentence for a person.
type Error struct {
	Reason Reason
	Msg    string
	Err    error
	// Candidates, for series-picking refusals, lists every series with
	// its score and reasons so the refusal can be inspected.
	Candidates []SeriesCandidate
}

// Error returns "reason: message[: cause]".
func (e *Error) Error() string {
	s := string(e.Reason) + ": " + e.Msg
	if e.Err != nil {
		s += ": " + e.Err.Error()
	}
	return s
}

// Unwrap returns the underlying cause, if any.
func (e *Error) Unwrap() error { return e.Err }

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

// RefusalDetail is the reason code, a sentence, and for series-picking
// refusals every candidate series with its score and reasons.
type RefusalDetail struct {
	Reason           Reason            `json:"reason"`
	Message          string            `json:"message"`
	SeriesCandidates []SeriesCandidate `json:"series_candidates,omitempty"`
}

// NewRefusalBody returns the refusal body with the research-use notice.
func NewRefusalBody(reason Reason, msg string, candidates []SeriesCandidate) RefusalBody {
	return RefusalBody{Error: RefusalDetail{Reason: reason, Message: msg, SeriesCandidates: candidates}, Notice: Notice}
}
