#!/usr/bin/env bash
# Before/after check for refactors that must not change behaviour: runs `eis demo` (the whole pipeline:
# convert, check, batch fit, trends, plots, report) with the binary of a base commit and with the
# working tree's, and compares every file they write byte by byte, plus stdout and stderr.
# Usage: tests/compare-outputs.sh BASE_REF   (e.g. main~3); exit 0 when everything is identical.
#        tests/compare-outputs.sh DIR        compares with the outputs a previous run kept in DIR.
# Outputs that differ on purpose are listed and explained in the commit that changes them.
base="${1:?usage: tests/compare-outputs.sh BASE_REF}"
source "$(dirname "$0")/../bench/preamble.sh"
trap 'git worktree remove --force "$work/base-src" >/dev/null 2>&1 || true; rm -rf "$work"' EXIT
run() { # binary, folder
  mkdir -p "$2" && (cd "$2" && "$1" demo >stdout.txt 2>stderr.txt; echo "exit $?" >status.txt)
  # The one line that holds a wall time.
  sed -i -E 's/^Done in [0-9.]+ s\./Done in (time) s./' "$2/stdout.txt"
}
if [ -d "$base" ]; then
  cp -r "$base" "$work/before"
else
  git worktree add --detach -q "$work/base-src" "$base"
  CARGO_TARGET_DIR="$PWD/target/compare-base" cargo build --release -q -p eis-cli \
    --manifest-path "$work/base-src/Cargo.toml"
  run "$PWD/target/compare-base/release/eis" "$work/before"
fi
run "$PWD/$eis" "$work/after"
if diff -r -q "$work/before" "$work/after"; then
  echo "identical: $(find "$work/after" -type f | wc -l) files"
else
  echo "outputs differ (diff -r above); inspect with: diff -r $work/before $work/after" >&2
  trap - EXIT
  exit 1
fi
