package server

import (
	"errors"
	"fmt"
	"testing"

	"github.com/grpc-ecosystem/grpc-gateway/v2/runtime"
	"google.golang.org/grpc/codes"

	"github.com/midsag/midsag"
)

// TestReasonTableCoversEveryReason: every code of reason.go (through
// midsag.AllReasons, which the root's test checks against the file's
// constants) has a row.
func TestReasonTableCoversEveryReason(t *testing.T) {
	for _, r := range midsag.AllReasons() {
		if _, ok := ReasonTable[r]; !ok {
			t.Errorf("reason %q has no row in ReasonTable", r)
		}
	}
	if len(ReasonTable) != len(midsag.AllReasons()) {
		t.Errorf("ReasonTable has %d rows for %d reasons", len(ReasonTable), len(midsag.AllReasons()))
	}
}

// TestReasonTableSemantics checks each row against the sources cited on
// ReasonTable. RFC 9110 section 15: refusals of the input or the request
// are client errors (4xx, 15.5), failures of the service server errors
// (5xx, 15.6). The gRPC code must carry the same class as the HTTP
// status: grpc-gateway v2.33.0's runtime.HTTPStatusFromCode (the
// reference mapping this service's gateway uses) must give a status of
// the same class, and the same status where ours is one it can give.
func TestReasonTableSemantics(t *testing.T) {
	gatewayStatuses := map[int]bool{}
	for c := codes.OK; c <= codes.Unauthenticated; c++ {
		gatewayStatuses[runtime.HTTPStatusFromCode(c)] = true
	}
	for r, m := range ReasonTable {
		class := m.HTTP / 100
		if m.Fault && class != 5 || !m.Fault && class != 4 {
			t.Errorf("%s: HTTP %d, fault %v: RFC 9110 puts refusals in 4xx, failures in 5xx", r, m.HTTP, m.Fault)
		}
		// PS3.7 C.1.3 (from memory): a failure status of the service is
		// 0x0110 Processing Failure, a refusal an Axxx or Cxxx status.
		if m.Fault != (m.DICOM == 0x0110) || m.DICOM != 0x0110 && m.DICOM>>12 != 0xA && m.DICOM>>12 != 0xC {
			t.Errorf("%s: DIMSE status %#04x, fault %v", r, m.DICOM, m.Fault)
		}
		gw := runtime.HTTPStatusFromCode(m.GRPC)
		if gw/100 != class {
			t.Errorf("%s: gRPC %v maps to HTTP %d at the gateway, a different class from our %d", r, m.GRPC, gw, m.HTTP)
		}
		if gatewayStatuses[m.HTTP] && gw != m.HTTP {
			t.Errorf("%s: HTTP %d with gRPC %v, which the gateway maps to %d", r, m.HTTP, m.GRPC, gw)
		}
	}
}

// TestReasonTableCases pins the rows whose meaning the cited sources fix
// one way (DIMSE statuses from memory, PS3.4 Annex B: 0xA700 out of
// resources, 0xA900 data set does not match, 0xC000 cannot understand,
// 0x0110 processing failure): RFC 9110 15.5.14 (413 for a body beyond a limit), 15.5.16 (415
// for a format not accepted), 15.5.21 (422 for a well-formed study that
// cannot be processed), RFC 6585 4 (429 for overload, gRPC
// RESOURCE_EXHAUSTED), 15.5.2 and 15.5.5 (401, 404).
func TestReasonTableCases(t *testing.T) {
	cases := []struct {
		r     midsag.Reason
		http  int
		grpc  codes.Code
		dicom uint16
	}{
		{midsag.ReasonTooLarge, 413, codes.InvalidArgument, 0xA700},
		{midsag.ReasonNotDICOM, 415, codes.InvalidArgument, 0xC000},
		{midsag.ReasonUnsupportedSyntax, 415, codes.InvalidArgument, 0xC000},
		{midsag.ReasonMultipleStudies, 400, codes.InvalidArgument, 0xA900},
		{midsag.ReasonNoSagittalT2, 422, codes.FailedPrecondition, 0xC000},
		{midsag.ReasonModelInputMismatch, 422, codes.FailedPrecondition, 0xC000},
		{midsag.ReasonOverloaded, 429, codes.ResourceExhausted, 0xA700},
		{midsag.ReasonUnauthenticated, 401, codes.Unauthenticated, 0xC000},
		{midsag.ReasonNotFound, 404, codes.NotFound, 0xC000},
		{midsag.ReasonInternal, 500, codes.Internal, 0x0110},
	}
	for _, c := range cases {
		if got := DICOMStatus(c.r); got != c.dicom {
			t.Errorf("DICOMStatus(%s) = %#04x, want %#04x", c.r, got, c.dicom)
		}
		if got := HTTPStatus(c.r); got != c.http {
			t.Errorf("HTTPStatus(%s) = %d, want %d", c.r, got, c.http)
		}
		if got := GRPCCode(c.r); got != c.grpc {
			t.Errorf("GRPCCode(%s) = %v, want %v", c.r, got, c.grpc)
		}
	}
}

// TestRefusalStatus: the C-STORE answer to an Ingest error (PS3.4 B.2.3,
// from memory): its reason's status through a wrapped chain, and 0xA700
// Out of Resources for a storage failure without a reason.
func TestRefusalStatus(t *testing.T) {
	for _, c := range []struct {
		err  error
		want uint16
	}{
		{fmt.Errorf("ingest: %w", midsag.Rejectf(midsag.ReasonNotDICOM, "no DICM")), 0xC000},
		{midsag.Rejectf(midsag.ReasonTooLarge, "study full"), 0xA700},
		{errors.New("disk full"), 0xA700},
	} {
		if got := RefusalStatus(c.err); got != c.want {
			t.Errorf("%v: %#04x, want %#04x", c.err, got, c.want)
		}
	}
}
