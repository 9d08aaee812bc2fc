// Package grpcapi serves midsag.v1 (api/midsag/v1) over gRPC and HTTP on
// top of a server.Backend: the StudyScoring gRPC service with reflection
// and health, its REST gateway (run in-process, no loopback dial), the
// upload endpoint POST /v1/studies:score, the OpenAPI document, and the
// routes of DICOMweb STOW-RS, which package server/stowrs serves.
//
// Build both listeners from one Config:
//
//	gs, err := grpcapi.NewGRPCServer(cfg)
//	h, err := grpcapi.NewHTTPHandler(ctx, cfg, map[string]http.Handler{"/healthz": hz})
//
// Every refusal carries a reason code from midsag.Reason (or one of the
// few request-level codes below), the same string in an HTTP body
// {"error":{"reason","message"},"notice"} and in a gRPC status, where it
// is also an errdetails.ErrorInfo with domain "midsag". Logs never hold
// patient data: only UIDs, sizes, reasons and durations.
package grpcapi
