#!/usr/bin/env bash
# Builds the demo cohort for the README: synthetic phantom studies scored with
# the bundled demo model.
#
#   bash scripts/demo-cohort.sh [--reader] DIR [N] [SEED]
#
# writes DIR/study-NNNN/ and DIR/labels.csv (midsag phantom) and
# DIR/scores.csv with study_instance_uid,raw_output,probability,
# calibrated_probability,decision,label (label copied from labels.csv, so
# the table also serves as a validation table for midsag calibrate). With --reader it adds a column "reader":
# a SIMULATED reader who is right with probability 0.85 on each study,
# seeded. That column is invented data for the demo only, not a person.
# Research use only; phantoms mean nothing for a real patient.
set -euo pipefail

reader=0
if [[ "${1:-}" == "--reader" ]]; then reader=1; shift; fi
dir=${1:?usage: demo-cohort.sh [--reader] DIR [N] [SEED]}
n=${2:-60}
seed=${3:-7}
bin=${MIDSAG_BIN:-bin/midsag}
py=/usr/bin/python3

[[ -x "$bin" ]] || { echo "demo-cohort: $bin not found; run make first" >&2; exit 1; }
"$bin" phantom --out "$dir" --studies "$n" --seed "$seed"

tmp=$(mktemp "$dir/.scores.csv.XXXXXX")
trap 'rm -f "$tmp"' EXIT
for study in "$dir"/study-*/; do
  "$bin" score --json "$study"
done | "$py" -c '
import json, random, sys
reader, seed, labels_path = sys.argv[1] == "1", int(sys.argv[2]), sys.argv[3]
truth = {}
with open(labels_path) as f:
    next(f)
    for line in f:
        uid, label = line.strip().split(",")
        truth[uid] = label
rng = random.Random(seed)
cols = ["study_instance_uid", "raw_output", "probability", "calibrated_probability", "decision"]
print(",".join(cols + ["label"] + (["reader"] if reader else [])))
text, dec, pos = sys.stdin.read(), json.JSONDecoder(), 0
while True:
    while pos < len(text) and text[pos].isspace():
        pos += 1
    if pos >= len(text):
        break
    r, pos = dec.raw_decode(text, pos)
    label = truth[r["study_instance_uid"]]
    row = [str(r[c]) for c in cols] + [label]
    if reader:
        right = rng.random() < 0.85  # simulated reader: right with probability 0.85
        row.append(label if right else str(1 - int(label)))
    print(",".join(row))
' "$reader" "$seed" "$dir/labels.csv" > "$tmp"
mv "$tmp" "$dir/scores.csv"
trap - EXIT
echo "wrote $dir/scores.csv ($(($(wc -l < "$dir/scores.csv") - 1)) studies)"
