#!/usr/bin/env bash
# Accuracy of the reductions on the demo's own frames (the reductions issue, Benchmarks): runs
# `oedolog demo --truth FILE` for MINUTES of real time and compares every load step that reached `ready`
# with the simulator's answer key — cv by both methods and the one the daemon trusts, t50, t90, the ready
# time over the true t100, and the board's ETA of ready once t50 has passed. Not part of tests/run.sh
# (a benchmark, not a timed test; the default run holds a short check of the same in tests/e2e).
#   tests/bench/accuracy.sh [MINUTES] [SPEED] [FRAMES]    (defaults 10 min, 1000×, 12 frames)
# Targets: trusted cv median |error| <= 10 %, p90 <= 25 %; no error beyond 2x without a flag; ready never
# before t100, median ready <= 2.5 t100; ETA after t50 within ±30 % for 80 % of load steps.
set -euo pipefail
cd "$(dirname "${BASH_SOURCE[0]}")/../.."
minutes=${1:-10}
speed=${2:-1000}
frames=${3:-12}
cargo build --release -p oedolog --bin oedolog -q

work=$(mktemp -d)
demo=
cleanup() {
  if [ -n "$demo" ]; then kill "$demo" 2> /dev/null || true; wait "$demo" 2> /dev/null || true; fi
  rm -rf "$work"
}
trap cleanup EXIT

"${CARGO_TARGET_DIR:-target}"/release/oedolog demo --frames "$frames" --speed "$speed" --listen 127.0.0.1:0 --db "$work/demo.sqlite" \
  --truth "$work/truth.jsonl" > "$work/demo.out" 2> "$work/demo.err" &
demo=$!
for _ in $(seq 1 200); do
  grep -q '^dashboard at ' "$work/demo.out" && break
  sleep 0.1
done
base=$(sed -n 's/^dashboard at \(http:[^ ]*\)\/$/\1/p' "$work/demo.out")
[ -n "$base" ] || { cat "$work/demo.out" "$work/demo.err" >&2; exit 1; }
echo "== demo: $frames frames at ${speed}x for $minutes min real ($(python3 -c "print(round($minutes*60*$speed/86400, 1))") simulated days), $base"
python3 tests/bench/accuracy.py "$base" "$work/truth.jsonl" "$((minutes * 60))" --json "${ACCURACY_JSON:-target/accuracy.json}"
