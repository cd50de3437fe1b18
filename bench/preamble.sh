# Sourced (not run) by the bench and compare scripts, after which they stand at the repository root with
# strict error handling, a scratch folder "$work" removed on exit (a script may replace the trap to
# clean up more), and a release build of the CLI at "$eis". Use:
#   source "$(dirname "$0")/../bench/preamble.sh"
set -euo pipefail
cd "$(dirname "$0")/.."
work="$(mktemp -d)"
trap 'rm -rf "$work"' EXIT
cargo build --release -q -p eis-cli
eis=target/release/eis
