// Package server makes midsag a service: it receives DICOM instances from
// every listener (REST, STOW-RS, gRPC, the DICOM listener), stores each one
// durably before acknowledging it, scores a study once no instance has
// arrived for a settle time (or at once for a direct request), and keeps
// every result version. Scoring always goes through midsag.Pipeline.
//
// The listeners live in subpackages: server/grpcapi (gRPC, the REST
// gateway, STOW-RS), server/dimse (the DICOM upper layer and DIMSE); the
// spool and results database in server/store. Core ties them together and
// implements Backend, the one interface the listeners call.
package server
