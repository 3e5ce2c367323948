#!/usr/bin/env bash
# Soak: 32 simulated frames at 1500× clock speed with injected faults (drop, exception, late replies: 5.5 % of
# requests) and `kill -9` of the daemon every 120 s, for SECONDS of real time (default 1800: about 31 days of
# clock time), against release binaries. The harness is tests/e2e/soak.rs (its 25 s smoke runs in the default
# test run); this script drives it long. Not part of tests/run.sh.
#   tests/soak.sh [SECONDS]      kill period: 120 s, or SECONDS/4 when that is shorter
# OEDOLOG_SOAK_KILL_EVERY_SECS and OEDOLOG_SOAK_SPEED override the kill period and the speed. The report is
# printed and written to target/soak/report.json; target/soak/work/ keeps the database and the config.
set -euo pipefail
cd "$(dirname "${BASH_SOURCE[0]}")/.."
seconds=${1:-1800}
case "$seconds" in
  '' | *[!0-9]*) echo "tests/soak.sh: SECONDS must be a whole number of seconds, got '$seconds'" >&2; exit 2 ;;
esac
kill_every=$((seconds / 4 < 120 ? seconds / 4 : 120))
cargo build --release -p oedolog -p oedolog-sim
export OEDOLOG_SOAK_SECS="$seconds"
export OEDOLOG_SOAK_KILL_EVERY_SECS="${OEDOLOG_SOAK_KILL_EVERY_SECS:-$kill_every}"
export OEDOLOG_SOAK_SPEED="${OEDOLOG_SOAK_SPEED:-1500}"
export OEDOLOG_SOAK_BIN_DIR="$PWD/target/release"
export OEDOLOG_SOAK_REPORT="$PWD/target/soak/report.json"
echo "== soak: ${seconds} s real at ${OEDOLOG_SOAK_SPEED}x, kill -9 every ${OEDOLOG_SOAK_KILL_EVERY_SECS} s, binaries in $OEDOLOG_SOAK_BIN_DIR"
cargo test -p oedolog-tests --test e2e soak:: -- --nocapture --test-threads 1
