#!/usr/bin/env bash
# The chain benchmark (bench/chain_campaign.rs): 6 cells x 3 SOC levels x 13 check-ups = 234 invented
# spectra with a film arc and a charge-transfer arc with finite diffusion 1-1.6 decades apart. Counts
# the spectra with R0 within 5 % and both arc resistances within 10 % of the truth for `eis batch` by
# default, with --no-warm-start, with --share (CPE exponents and diffusion time constant), and for
# fits started at the true values (the per-spectrum ceiling); prints wall and CPU times on JOBS threads.
# Usage: bench/chain_campaign.sh [JOBS]   (default 2)
source "$(dirname "$0")/../bench/preamble.sh"
jobs="${1:-2}"
cargo build --release -q -p eis-core --example chain_campaign
gen=target/release/examples/chain_campaign
"$gen" gen "$work" >/dev/null
"$gen" ceiling
# Each mode three times: the right count of the last run, the shortest wall time and its CPU time
# (on a shared machine wall times drift; the shortest is the least disturbed).
run() {
  local name="$1"; shift
  local best="" cpu=""
  for k in 1 2 3; do
    rm -rf "$work/$name"
    /usr/bin/time -f "%e %U" -o "$work/time.txt" "$eis" batch "$work/in" --model "$work/model.circ" \
      --out "$work/$name" --name-pattern '{cell}_c{cycle}_soc{soc}' --jobs "$jobs" "$@" >/dev/null 2>&1 || true
    read -r wall user < <(tail -1 "$work/time.txt")
    if [ -z "$best" ] || [ "$(echo "$wall < $best" | bc -l)" = 1 ]; then best="$wall"; cpu="$user"; fi
  done
  printf '%-14s %s; shortest of 3: %.2f s wall (%.0f spectra/s on %s threads), %.2f s CPU\n' "$name" \
    "$("$gen" score "$work/$name/results.csv" 2>/dev/null)" "$best" "$(echo "234 / $best" | bc -l)" \
    "$jobs" "$cpu"
}
run default
run no-warm-start --no-warm-start
run share --share Q1.n,Q2.n,Wt1.tau
