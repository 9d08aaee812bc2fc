#!/usr/bin/env bash
# Benchmarks reading and preparing one study, each against a baseline
# measured in the same run, and prints the ratios.
#   bash bench/study.sh [count]
set -euo pipefail
cd "$(dirname "${BASH_SOURCE[0]}")/.."
count=${1:-5}
out=$(go test -run '^$' -bench 'Study|Series' -benchmem -count "$count" ./preprocess/)
echo "$out"
echo "$out" | awk '
  /^Benchmark/ { name=$1; sub(/-[0-9]+$/, "", name); ns[name]+=$3; n[name]++ }
  END {
    c=ns["BenchmarkStudyParseBaseline"]/n["BenchmarkStudyParseBaseline"]
    r=ns["BenchmarkStudyReadHeaders"]/n["BenchmarkStudyReadHeaders"]
    d=ns["BenchmarkSeriesDecodeBaseline"]/n["BenchmarkSeriesDecodeBaseline"]
    p=ns["BenchmarkStudyPrepare"]/n["BenchmarkStudyPrepare"]
    printf "\nread headers of the study: %.2f ms = %.2f x the DICOM library parsing them alone (%.2f ms)\n", r/1e6, r/c, c/1e6
    printf "prepare (pick, decode, score, stack): %.2f ms = %.1f x decoding the series alone (%.2f ms)\n", p/1e6, p/d, d/1e6
  }'
