#!/usr/bin/env bash
# Throughput and peak memory of `eis convert` and `eis check` on one file holding many spectra.
#
# Usage: bench/import.sh [SPECTRA]   (default 1000; needs a release build: cargo build --release -p eis-cli)
#
# The input is generated here: one noisy spectrum of circuits/two-interfaces.circ from `eis simulate`
# (71 points, 100 kHz to 10 mHz), repeated SPECTRA times with a cycle column and a slightly different
# real part per cycle, written as a semicolon-separated export with decimal commas.
set -euo pipefail
n=${1:-1000}
root=$(cd "$(dirname "$0")/.." && pwd)
eis="$root/target/release/eis"
work=$(mktemp -d)
trap 'rm -rf "$work"' EXIT
"$eis" simulate --model "$root/circuits/two-interfaces.circ" --noise 0.002 --seed 11 -o "$work/one.csv" 2>/dev/null
awk -F, -v n="$n" 'NR == 1 { next } { f[NR] = $1; re[NR] = $2; im[NR] = $3; last = NR }
  END {
    print "Freq (Hz);Z'"'"' (Ohm);Z'"''"' (Ohm);Cycle"
    for (c = 1; c <= n; c++) for (i = 2; i <= last; i++) {
      line = sprintf("%.10g;%.10g;%.10g;%d", f[i], re[i] * (1 + c * 1e-4), im[i], c)
      gsub(/\./, ",", line); print line
    }
  }' "$work/one.csv" > "$work/many.csv"
echo "input: $n spectra, $(wc -l < "$work/many.csv") lines, $(du -h "$work/many.csv" | cut -f1)"
measure() {
  local label=$1; shift
  /usr/bin/time -v "$@" > /dev/null 2> "$work/time.txt" || true
  local wall mem
  wall=$(grep "Elapsed (wall clock)" "$work/time.txt" | awk '{print $NF}')
  mem=$(grep "Maximum resident set size" "$work/time.txt" | awk '{print $NF}')
  secs=$(echo "$wall" | awk -F: '{ if (NF == 3) print $1*3600 + $2*60 + $3; else print $1*60 + $2 }')
  echo "$label: wall $wall, $(awk -v n="$n" -v s="$secs" 'BEGIN { printf "%.0f", n / s }') spectra/s, peak RSS ${mem} kB"
}
measure "read + convert" "$eis" convert "$work/many.csv" --out "$work/out"
test "$(ls "$work/out" | wc -l)" -eq $((n + 1))
measure "read + check  " "$eis" check "$work/many.csv" --json
