package grpcapi

import (
	"strings"

	"google.golang.org/genproto/googleapis/rpc/errdetails"
	"google.golang.org/grpc/status"

	"github.com/midsag/midsag"
	"github.com/midsag/midsag/server"
)

// errorDomain is the ErrorInfo domain of every midsag gRPC error.
const errorDomain = "midsag"

// grpcStatus is the status a gRPC call returns for err: the code from
// server.ReasonTable, "reason: message" as the message, and an ErrorInfo
// detail with the reason and the refusal's details as metadata.
func grpcStatus(err error) error {
	e := server.Classify(err)
	st := status.New(server.GRPCCode(e.Reason), string(e.Reason)+": "+server.SentMessage(e))
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
		return server.Classify(err)
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
