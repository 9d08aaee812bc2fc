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
}

// ReasonTable maps every reason code of reason.go to its HTTP status and
// gRPC code; REST, STOW-RS and gRPC all report through it. A test checks
// every code has a row.
//
// HTTP statuses by RFC 9110 section 15: 400 Bad Request (15.5.1: the
// request is malformed), 401 Unauthorized (15.5.2), 404 Not Found
// (15.5.5), 413 Content Too Large (15.5.14), 415 Unsupported Media Type
// (15.5.16: the payload's format is not accepted), 422 Unprocessable
// Content (15.5.21: well-formed, but its contents cannot be processed),
// 500 Internal Server Error (15.6.1); 429 Too Many Requests is RFC 6585
// section 4. gRPC codes by the gRPC status code document
// (grpc/grpc doc/statuscodes.md): INVALID_ARGUMENT for an argument that is
// wrong whatever the system's state, FAILED_PRECONDITION for one the
// system cannot act on in its present form, RESOURCE_EXHAUSTED for a
// quota or capacity, NOT_FOUND, UNAUTHENTICATED, INTERNAL.
var ReasonTable = map[midsag.Reason]Mapping{
	midsag.ReasonNoInput:              {HTTP: http.StatusBadRequest, GRPC: codes.InvalidArgument},
	midsag.ReasonNotDICOM:             {HTTP: http.StatusUnsupportedMediaType, GRPC: codes.InvalidArgument},
	midsag.ReasonTruncated:            {HTTP: http.StatusBadRequest, GRPC: codes.InvalidArgument},
	midsag.ReasonTooLarge:             {HTTP: http.StatusRequestEntityTooLarge, GRPC: codes.InvalidArgument},
	midsag.ReasonUnsupportedSyntax:    {HTTP: http.StatusUnsupportedMediaType, GRPC: codes.InvalidArgument},
	midsag.ReasonBadPixelData:         {HTTP: http.StatusBadRequest, GRPC: codes.InvalidArgument},
	midsag.ReasonMultipleStudies:      {HTTP: http.StatusBadRequest, GRPC: codes.InvalidArgument},
	midsag.ReasonNoSagittalT2:         {HTTP: http.StatusUnprocessableEntity, GRPC: codes.FailedPrecondition},
	midsag.ReasonTooFewSlices:         {HTTP: http.StatusUnprocessableEntity, GRPC: codes.FailedPrecondition},
	midsag.ReasonInconsistentGeometry: {HTTP: http.StatusUnprocessableEntity, GRPC: codes.FailedPrecondition},
	midsag.ReasonMidlineNotInSlab:     {HTTP: http.StatusUnprocessableEntity, GRPC: codes.FailedPrecondition},
	midsag.ReasonIncompleteSeries:     {HTTP: http.StatusUnprocessableEntity, GRPC: codes.FailedPrecondition},
	midsag.ReasonDuplicateInstance:    {HTTP: http.StatusUnprocessableEntity, GRPC: codes.FailedPrecondition},
	midsag.ReasonUnreadable:           {HTTP: http.StatusBadRequest, GRPC: codes.InvalidArgument},
	midsag.ReasonModelInputMismatch:   {HTTP: http.StatusUnprocessableEntity, GRPC: codes.FailedPrecondition},
	midsag.ReasonBadModel:             {HTTP: http.StatusUnprocessableEntity, GRPC: codes.FailedPrecondition},
	midsag.ReasonUnknownModel:         {HTTP: http.StatusBadRequest, GRPC: codes.InvalidArgument},
	midsag.ReasonBadTable:             {HTTP: http.StatusBadRequest, GRPC: codes.InvalidArgument},
	midsag.ReasonMixedModels:          {HTTP: http.StatusUnprocessableEntity, GRPC: codes.FailedPrecondition},
	midsag.ReasonOverlappingStudies:   {HTTP: http.StatusUnprocessableEntity, GRPC: codes.FailedPrecondition},
	midsag.ReasonOverloaded:           {HTTP: http.StatusTooManyRequests, GRPC: codes.ResourceExhausted},
	midsag.ReasonBadRequest:           {HTTP: http.StatusBadRequest, GRPC: codes.InvalidArgument},
	midsag.ReasonNotFound:             {HTTP: http.StatusNotFound, GRPC: codes.NotFound},
	midsag.ReasonUnauthenticated:      {HTTP: http.StatusUnauthorized, GRPC: codes.Unauthenticated},
	midsag.ReasonInternal:             {HTTP: http.StatusInternalServerError, GRPC: codes.Internal, Fault: true},
	midsag.ReasonError:                {HTTP: http.StatusInternalServerError, GRPC: codes.Internal, Fault: true},
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
