// Package midsagv1 is the generated Go API of midsag.v1 (midsag.proto):
// messages, the StudyScoring gRPC client and server, the REST gateway
// handlers, and the OpenAPI document. Regenerate with `make gen-api`; only
// this file is written by hand.
package midsagv1

import _ "embed"

// OpenAPI is the OpenAPI 2.0 document protoc-gen-openapiv2 wrote from
// midsag.proto and midsag.http.yaml, served at GET /openapi.json.
//
//go:embed midsag.swagger.json
var OpenAPI []byte
