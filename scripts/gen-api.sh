#!/usr/bin/env bash
# gen-api.sh regenerates the Go code and the OpenAPI document of
# api/midsag/v1 from midsag.proto and midsag.http.yaml. The plugins are
# pinned to the module versions in go.mod so the output does not drift;
# the result is committed (`make gen-api`).
set -euo pipefail

cd "$(dirname "$0")/.."

PROTOC=${PROTOC:-protoc}
GOBIN=$(go env GOPATH)/bin
# Pinned plugin versions: protoc-gen-go and the gateway plugins match the
# google.golang.org/protobuf and grpc-gateway/v2 versions in go.mod.
PROTOBUF_VERSION=v1.36.12
GATEWAY_VERSION=v2.33.0
GRPC_PLUGIN_VERSION=v1.5.1

install() {
	local bin=$1 pkg=$2 want=$3
	if ! "$GOBIN/$bin" --version 2>/dev/null | grep -q -- "${want#v}"; then
		go install "$pkg@$want"
	fi
}
install protoc-gen-go google.golang.org/protobuf/cmd/protoc-gen-go "$PROTOBUF_VERSION"
install protoc-gen-go-grpc google.golang.org/grpc/cmd/protoc-gen-go-grpc "$GRPC_PLUGIN_VERSION"
install protoc-gen-grpc-gateway github.com/grpc-ecosystem/grpc-gateway/v2/protoc-gen-grpc-gateway "$GATEWAY_VERSION"
install protoc-gen-openapiv2 github.com/grpc-ecosystem/grpc-gateway/v2/protoc-gen-openapiv2 "$GATEWAY_VERSION"

DIR=api/midsag/v1
PATH="$GOBIN:$PATH" "$PROTOC" -I api -I /usr/include \
	--go_out=api --go_opt=paths=source_relative \
	--go-grpc_out=api --go-grpc_opt=paths=source_relative \
	--grpc-gateway_out=api --grpc-gateway_opt=paths=source_relative \
	--grpc-gateway_opt=grpc_api_configuration=$DIR/midsag.http.yaml \
	--grpc-gateway_opt=standalone=false \
	--openapiv2_out=api \
	--openapiv2_opt=grpc_api_configuration=$DIR/midsag.http.yaml \
	--openapiv2_opt=json_names_for_fields=false \
	$DIR/midsag.proto

gofmt -w $DIR/*.go
