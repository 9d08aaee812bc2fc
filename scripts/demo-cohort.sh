#!/usr/bin/env bash
# Builds the demo cohort for the README: synthetic phantom studies scored with
# the bundled demo model.
#
#   bash scripts/demo-cohort.sh [--reader] [--followup] [--readers] DIR [N] [SEED]
#
# writes DIR/study-NNNN/ and DIR/labels.csv (midsag phantom) and
# DIR/scores.csv with study_instance_uid,raw_output,probability,
# calibrated_probability,decision,label (label copied from labels.csv, so
# the table also serves as a validation table for midsag calibrate). With --reader it adds a column "reader":
# a SIMULATED reader who is right with probability 0.85 on each study,
# seeded. That column is invented data for the demo only, not a person.
# With --followup it adds "followup_months" and "event": SIMULATED follow-up
# (INVENTED for the demo): an event time drawn from an exponential
# distribution with a rate of 0.008 per month without compression and 0.03
# with it, censored by a follow-up drawn uniformly from 12 to 60 months
# (event 1 when the event time comes first). With --readers it writes
# DIR/readers.csv (study_instance_uid,reader,rating): two SIMULATED readers,
# "reader_a" and "reader_b" (INVENTED, not people), rating each study 1 to 5
# from 2·label plus normal noise (SD 0.8 and 1.1) cut at 0.2, 0.8, 1.2 and
# 1.8. All of it is invented data for the demo only.
# Research use only; phantoms mean nothing for a real patient.
set -euo pipefail

reader=0 followup=0 readers=0
while [[ "${1:-}" == --* ]]; do
  case "$1" in
    --reader) reader=1 ;;
    --followup) followup=1 ;;
    --readers) readers=1 ;;
    *) echo "demo-cohort: unknown option $1" >&2; exit 2 ;;
  esac
  shift
done
dir=${1:?usage: demo-cohort.sh [--reader] [--followup] [--readers] DIR [N] [SEED]}
n=${2:-60}
seed=${3:-7}
bin=${MIDSAG_BIN:-bin/midsag}
py=/usr/bin/python3

[[ -x "$bin" ]] || { echo "demo-cohort: $bin not found; run make first" >&2; exit 1; }
"$bin" phantom --out "$dir" --studies "$n" --seed "$seed"

tmp=$(mktemp "$dir/.scores.csv.XXXXXX")
rtmp=$(mktemp "$dir/.readers.csv.XXXXXX")
trap 'rm -f "$tmp" "$rtmp"' EXIT
for study in "$dir"/study-*/; do
  "$bin" score --json "$study"
done | "$py" -c '
import json, random, sys
reader, seed, labels_path = sys.argv[1] == "1", int(sys.argv[2]), sys.argv[3]
followup, readers, readers_path = sys.argv[4] == "1", sys.argv[5] == "1", sys.argv[6]
truth = {}
with open(labels_path) as f:
    next(f)
    for line in f:
        uid, label = line.strip().split(",")
        truth[uid] = label
rng = random.Random(seed)
# Separate streams, so adding follow-up or readers leaves the reader column as it was.
frng, rrng = random.Random(seed + 1), random.Random(seed + 2)
cols = ["study_instance_uid", "raw_output", "probability", "calibrated_probability", "decision"]
print(",".join(cols + ["label"] + (["reader"] if reader else []) + (["followup_months", "event"] if followup else [])))
rout = open(readers_path, "w")
if readers:
    rout.write("study_instance_uid,reader,rating\n")

def rating(label, sd):
    # INVENTED: a simulated 1-5 rating, 2*label plus noise.
    x = 2 * int(label) + rrng.gauss(0, sd)
    return 1 + sum(x > c for c in (0.2, 0.8, 1.2, 1.8))

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
    if followup:
        # INVENTED follow-up: exponential event time, uniform censoring.
        t_event = frng.expovariate(0.03 if label == "1" else 0.008)
        t_cens = frng.uniform(12, 60)
        row += ["%.1f" % min(t_event, t_cens), "1" if t_event <= t_cens else "0"]
    if readers:
        for name, sd in (("reader_a", 0.8), ("reader_b", 1.1)):
            rout.write("%s,%s,%d\n" % (r["study_instance_uid"], name, rating(label, sd)))
    print(",".join(row))
rout.close()
' "$reader" "$seed" "$dir/labels.csv" "$followup" "$readers" "$rtmp" > "$tmp"
mv "$tmp" "$dir/scores.csv"
if [[ $readers == 1 ]]; then mv "$rtmp" "$dir/readers.csv"; else rm -f "$rtmp"; fi
trap - EXIT
echo "wrote $dir/scores.csv ($(($(wc -l < "$dir/scores.csv") - 1)) studies)"
if [[ $readers == 1 ]]; then echo "wrote $dir/readers.csv (simulated readers, invented)"; fi
