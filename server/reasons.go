package server

import (
	"net/http"

	"google.golang.org/grpc/codes"

	"github.com/midsag/midsag"
)

// Mapping is how one reason code is reported by each edge.
type Mapping struct {
	// HTTP is the status of a REST or STOW-RS error body.
	HTTP int
	// GRPC is the code of a gRPC status.
	GRPC codes.Code
	// Fault marks a failure of the service rather than a refusal of the
	// input: its cause is logged and never sent.
	Fault bool
	// DICOM is the DIMSE status of a refused instance, sent as a STOW-RS
	// Failure Reason (0008,1197) (PS3.18 10.5.3 refers to the status codes
	// of PS3.4 Annex B and PS3.7 Annex C; values from memory): 0xA700
	// Refused: Out of Resources, 0xA900 Error: Data Set Does Not Match SOP
	// Class (used for an instance of another study), 0xC000 Error: Cannot
	// Understand, 0x0110 Processing Failure.
	DICOM uint16
}

// DIMSE statuses of ReasonTable (see Mapping.DICOM).
const (
	statusOutOfResources = 0xA700
	statusMismatch       = 0xA900
	statusCannotParse    = 0xC000
	statusProcessing     = 0x0110
)

// ReasonTable maps every reason code of reason.go to its HTTP status,
// gRPC code and DIMSE status; REST, STOW-RS and gRPC all report through
// it, and the CLI's exit code follows Fault. A test checks
// every code has a row.
//
// HTTP statuses by RFC 9110 section 15: 400 Bad Request (15.5.1: the
// request is malformed), 401 Unauthorized (15.5.2), 404 Not Found
// (15.5.5), 406 Not Acceptable (15.5.7), 413 Content Too Large (15.5.14), 415 Unsupported Media Type
// (15.5.16: the payload's format is not accepted), 422 Unprocessable
// Content (15.5.21: well-formed, but its contents cannot be processed),
// 500 Internal Server Error (15.6.1); 429 Too Many Requests is RFC 6585
// section 4. gRPC codes by the gRPC status code document
// (grpc/grpc doc/statuscodes.md): INVALID_ARGUMENT for an argument that is
// wrong whatever the system's state, FAILED_PRECONDITION for one the
// system cannot act on in its present form, RESOURCE_EXHAUSTED for a
// quota or capacity, NOT_FOUND, UNAUTHENTICATED, INTERNAL, DATA_LOSS for
// unrecoverable data corruption.
var ReasonTable = map[midsag.Reason]Mapping{
	midsag.ReasonNoInput:              {HTTP: http.StatusBadRequest, GRPC: codes.InvalidArgument, DICOM: statusCannotParse},
	midsag.ReasonNotDICOM:             {HTTP: http.StatusUnsupportedMediaType, GRPC: codes.InvalidArgument, DICOM: statusCannotParse},
	midsag.ReasonTruncated:            {HTTP: http.StatusBadRequest, GRPC: codes.InvalidArgument, DICOM: statusCannotParse},
	midsag.ReasonTooLarge:             {HTTP: http.StatusRequestEntityTooLarge, GRPC: codes.InvalidArgument, DICOM: statusOutOfResources},
	midsag.ReasonUnsupportedSyntax:    {HTTP: http.StatusUnsupportedMediaType, GRPC: codes.InvalidArgument, DICOM: statusCannotParse},
	midsag.ReasonBadPixelData:         {HTTP: http.StatusBadRequest, GRPC: codes.InvalidArgument, DICOM: statusCannotParse},
	midsag.ReasonMultipleStudies:      {HTTP: http.StatusBadRequest, GRPC: codes.InvalidArgument, DICOM: statusMismatch},
	midsag.ReasonSOPClassMismatch:     {HTTP: http.StatusBadRequest, GRPC: codes.InvalidArgument, DICOM: statusMismatch},
	midsag.ReasonNoSagittalT2:         {HTTP: http.StatusUnprocessableEntity, GRPC: codes.FailedPrecondition, DICOM: statusCannotParse},
	midsag.ReasonTooFewSlices:         {HTTP: http.StatusUnprocessableEntity, GRPC: codes.FailedPrecondition, DICOM: statusCannotParse},
	midsag.ReasonInconsistentGeometry: {HTTP: http.StatusUnprocessableEntity, GRPC: codes.FailedPrecondition, DICOM: statusCannotParse},
	midsag.ReasonMidlineNotInSlab:     {HTTP: http.StatusUnprocessableEntity, GRPC: codes.FailedPrecondition, DICOM: statusCannotParse},
	midsag.ReasonIncompleteSeries:     {HTTP: http.StatusUnprocessableEntity, GRPC: codes.FailedPrecondition, DICOM: statusCannotParse},
	midsag.ReasonDuplicateInstance:    {HTTP: http.StatusUnprocessableEntity, GRPC: codes.FailedPrecondition, DICOM: statusCannotParse},
	midsag.ReasonUnreadable:           {HTTP: http.StatusBadRequest, GRPC: codes.InvalidArgument, DICOM: statusCannotParse},
	midsag.ReasonModelInputMismatch:   {HTTP: http.StatusUnprocessableEntity, GRPC: codes.FailedPrecondition, DICOM: statusCannotParse},
	midsag.ReasonBadModel:             {HTTP: http.StatusUnprocessableEntity, GRPC: codes.FailedPrecondition, DICOM: statusCannotParse},
	midsag.ReasonUnknownModel:         {HTTP: http.StatusBadRequest, GRPC: codes.InvalidArgument, DICOM: statusCannotParse},
	midsag.ReasonBadTable:             {HTTP: http.StatusBadRequest, GRPC: codes.InvalidArgument, DICOM: statusCannotParse},
	midsag.ReasonMixedModels:          {HTTP: http.StatusUnprocessableEntity, GRPC: codes.FailedPrecondition, DICOM: statusCannotParse},
	midsag.ReasonOverlappingStudies:   {HTTP: http.StatusUnprocessableEntity, GRPC: codes.FailedPrecondition, DICOM: statusCannotParse},
	midsag.ReasonOverloaded:           {HTTP: http.StatusTooManyRequests, GRPC: codes.ResourceExhausted, DICOM: statusOutOfResources},
	midsag.ReasonBadRequest:           {HTTP: http.StatusBadRequest, GRPC: codes.InvalidArgument, DICOM: statusCannotParse},
	midsag.ReasonNotFound:             {HTTP: http.StatusNotFound, GRPC: codes.NotFound, DICOM: statusCannotParse},
	midsag.ReasonUnauthenticated:      {HTTP: http.StatusUnauthorized, GRPC: codes.Unauthenticated, DICOM: statusCannotParse},
	midsag.ReasonNotAcceptable:        {HTTP: http.StatusNotAcceptable, GRPC: codes.InvalidArgument, DICOM: statusCannotParse},
	midsag.ReasonInternal:             {HTTP: http.StatusInternalServerError, GRPC: codes.Internal, Fault: true, DICOM: statusProcessing},
	midsag.ReasonCorruptInstance:      {HTTP: http.StatusInternalServerError, GRPC: codes.DataLoss, Fault: true, DICOM: statusProcessing},
	midsag.ReasonError:                {HTTP: http.StatusInternalServerError, GRPC: codes.Internal, Fault: true, DICOM: statusProcessing},
}

// MappingOf returns the row of r; a code without one (only a peer's, read
// back from a status) is reported as a bad request.
func MappingOf(r midsag.Reason) Mapping {
	if m, ok := ReasonTable[r]; ok {
		return m
	}
	return ReasonTable[midsag.ReasonBadRequest]
}

// HTTPStatus maps a reason to its HTTP status (ReasonTable).
func HTTPStatus(r midsag.Reason) int { return MappingOf(r).HTTP }

// DICOMStatus maps a reason to the DIMSE status of a refused instance
// (ReasonTable).
func DICOMStatus(r midsag.Reason) uint16 { return MappingOf(r).DICOM }

// RefusalStatus is the DIMSE status of the refusal in err's chain
// (DICOMStatus), or 0xA700 Out of Resources when err carries no reason
// (a storage failure).
func RefusalStatus(err error) uint16 {
	if r, ok := midsag.ReasonOf(err); ok {
		return DICOMStatus(r)
	}
	return statusOutOfResources
}

// GRPCCode maps a reason to its gRPC status code (ReasonTable).
func GRPCCode(r midsag.Reason) codes.Code { return MappingOf(r).GRPC }

// ReasonOfCode names the reason for a gRPC status that carries none (the
// gateway's own parameter errors, the transport's): the request-level
// code of that status, else internal.
func ReasonOfCode(c codes.Code) midsag.Reason {
	switch c {
	case codes.NotFound:
		return midsag.ReasonNotFound
	case codes.Unauthenticated:
		return midsag.ReasonUnauthenticated
	case codes.InvalidArgument, codes.OutOfRange:
		return midsag.ReasonBadRequest
	case codes.ResourceExhausted:
		return midsag.ReasonOverloaded
	}
	return midsag.ReasonInternal
}
