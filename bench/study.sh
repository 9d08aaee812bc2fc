#!/usr/bin/env bash
# Benchmarks reading and preparing one study, each against a baseline
# measured in the same run, and prints the ratios.
#   bash bench/study.sh [count]
set -euo pipefail
cd "$(dirname "${BASH_SOURCE[0]}")/.."
count=${1:-5}
out=$(go test -run '^$' -bench 'Study|Series|PercentilePair' -benchmem -count "$count" ./preprocess/)
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
    d5=ns["BenchmarkSeriesDecodeBaseline512"]/n["BenchmarkSeriesDecodeBaseline512"]
    p5=ns["BenchmarkStudyPrepare512"]/n["BenchmarkStudyPrepare512"]
    printf "prepare at 512 x 512, stacked 3 x 512 x 512: %.2f ms = %.1f x decoding the series alone (%.2f ms)\n", p5/1e6, p5/d5, d5/1e6
    ps=ns["BenchmarkPercentilePairSortBaseline"]/n["BenchmarkPercentilePairSortBaseline"]
    pk=ns["BenchmarkPercentilePair"]/n["BenchmarkPercentilePair"]
    printf "1st and 99th percentiles of 3 x 512 x 512 values by selection: %.2f ms = %.3f x a full sort (%.2f ms)\n", pk/1e6, pk/ps, ps/1e6
  }'
