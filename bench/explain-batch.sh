#!/usr/bin/env bash
# Times one sparse occlusion map of a ResNet-50-sized model (3 x 512 x 512,
# random weights) at 1, 2, 4, 8 and 16 occluded copies per model call and
# prints each as a ratio of batch 1, measured in the same run: the
# measurement behind explain.DefaultBatchSize. Builds the model with
# Debian's python3-torch and python3-torchvision when it is not there.
#   bash bench/explain-batch.sh [count]
set -euo pipefail
cd "$(dirname "${BASH_SOURCE[0]}")/.."
count=${1:-1}
model=${MIDSAG_RESNET50:-/tmp/midsag-resnet50.onnx}
[ -f "$model" ] || /usr/bin/python3 bench/make-resnet50.py "$model"
out=$(MIDSAG_RESNET50="$model" go test -run '^$' -bench 'ResNet50Batch' -benchtime 1x -count "$count" ./explain/)
echo "$out"
echo "$out" | awk '
  /^BenchmarkResNet50Batch\/batch_/ { split($1, a, "_"); n=a[2]; sub(/-[0-9]+$/, "", n); ns[n]+=$3; c[n]++ }
  END {
    base=ns[1]/c[1]
    for (n=1; n<=16; n*=2) if (c[n]) printf "batch %2d: %.2f s per map = %.2f x batch 1\n", n, ns[n]/c[n]/1e9, ns[n]/c[n]/base
  }'
