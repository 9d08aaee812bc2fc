#!/usr/bin/env bash
# Times DCMTK storescu sending phantom studies (about 45 files each) to
# `midsag serve` (durable: spool fsync + SQLite commit before each success)
# and to DCMTK's storescp -od in the same run, and prints the ratio.
# Usage: bench/storescu-service.sh [iterations, default 10]
set -euo pipefail
cd "$(dirname "$0")/.."
n=${1:-10}
out=$(MIDSAG_REQUIRE_TOOLS=1 go test -run '^$' -bench '^BenchmarkStorescuToService$' -benchtime "${n}x" -count 1 ./cmd/midsag)
echo "$out"
echo "$out" | awk '
	$1 ~ /midsag-serve/ { m = $3 }
	$1 ~ /storescp/     { s = $3 }
	END {
		if (!m || !s) { print "benchmark lines missing" > "/dev/stderr"; exit 1 }
		printf "midsag serve / storescp: %.2f (below 1 means midsag is faster)\n", m / s
	}'
