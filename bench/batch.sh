#!/usr/bin/env bash
# Campaign throughput: N simulated spectra (default 10,000) of the demo cells, checked and fitted by
# `eis batch` on all cores. Prints spectra per second and peak memory (from /usr/bin/time).
# Usage: bench/batch.sh [N]
source "$(dirname "$0")/../bench/preamble.sh"
n="${1:-10000}"
# One demo cell per 13 cycles x 3 SOC = 39 spectra; replicate the demo's files under new cell names.
"$eis" demo --out "$work/demo" >/dev/null 2>&1 || true
mkdir -p "$work/in"
copies=$(( (n + 194) / 195 ))
for k in $(seq 1 "$copies"); do
  for f in "$work"/demo/raw/*.csv; do
    b="$(basename "$f")"
    cp "$f" "$work/in/${b/Z/R${k}x}"
  done
done
count=$(ls "$work/in" | wc -l)
start=$(date +%s.%N)
/usr/bin/time -v "$eis" batch "$work/in" --model "$work/demo/model.circ" --out "$work/out" \
  --name-pattern '{cell}_c{cycle}_soc{soc}' 2> "$work/time.txt" || true
end=$(date +%s.%N)
secs=$(echo "$end - $start" | bc -l)
echo "spectra: $count"
echo "seconds: $secs"
echo "spectra per second: $(echo "$count / $secs" | bc -l)"
grep -E "Maximum resident set size" "$work/time.txt"
