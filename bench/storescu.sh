#!/usr/bin/env bash
# Times DCMTK storescu sending one ~45-file phantom study to midsag's DICOM
# listener (server/dimse, handler writing each file durably: temp file,
# fsync, rename) and to DCMTK's storescp -od, in the same run, both with
# TCP_NODELAY=1, and prints the ratio midsag/storescp of ns/op (lower is
# better for midsag; 1.0 = as fast as storescp). Needs dcmtk.
# Usage: bench/storescu.sh [benchtime, default 20x]
set -euo pipefail
cd "$(dirname "$0")/.."
out=$(MIDSAG_REQUIRE_TOOLS=1 go test -run '^$' -bench '^BenchmarkStorescu$' -benchtime "${1:-20x}" -count 1 ./server/dimse)
echo "$out"
echo "$out" | awk '
	$1 ~ /^BenchmarkStorescu\/midsag(-[0-9]+)?$/         { m = $3 }
	$1 ~ /^BenchmarkStorescu\/midsag-nofsync(-[0-9]+)?$/ { n = $3 }
	$1 ~ /^BenchmarkStorescu\/storescp(-[0-9]+)?$/       { s = $3 }
	END {
		if (!m || !s) { print "benchmark lines missing" > "/dev/stderr"; exit 1 }
		printf "midsag (fsync) / storescp:   %.2f\n", m / s
		if (n) printf "midsag (no fsync) / storescp: %.2f\n", n / s
	}'
