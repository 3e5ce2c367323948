#!/usr/bin/env bash
# Idle cost: `oedolog run` with 32 frames polled at 1 Hz over Modbus TCP (the simulator), no browser
# open: the daemon's CPU share of one core (utime + stime of all threads, /proc/PID/stat, proc(5)) and its
# wakeups per second (voluntary + involuntary context switches of all threads, /proc/PID/task/*/status:
# a thread that sleeps and wakes switches once). Not part of tests/run.sh (benchmarks are not timed tests).
#   tests/bench/idle-cost.sh [SECONDS] [FRAMES]
set -euo pipefail
cd "$(dirname "${BASH_SOURCE[0]}")/../.."
seconds=${1:-30}
frames=${2:-32}
target=${CARGO_TARGET_DIR:-target}
cargo build --release -p oedolog -p oedolog-sim --bins -q
bin="$target/release"
work=$(mktemp -d)
cleanup() {
  local pids
  pids=$(jobs -p)
  [ -n "$pids" ] && kill $pids 2> /dev/null || true
  wait 2> /dev/null || true
  rm -rf "$work"
}
trap cleanup EXIT
wait_for() { # FILE PATTERN
  for _ in $(seq 100); do grep -q "$2" "$1" 2> /dev/null && return 0; sleep 0.1; done
  echo "idle-cost.sh: no '$2' in $1:" >&2; cat "$1" >&2; return 1
}
"$bin/oedolog-sim" --frames "$frames" --schedule manual --tcp 127.0.0.1:0 > "$work/sim.out" 2> /dev/null < /dev/null &
wait_for "$work/sim.out" "listening on tcp"
addr=$(sed -n 's/^listening on tcp //p' "$work/sim.out")
{
  printf '[store]\npath = "%s/lab.sqlite"\n[http]\nlisten = "127.0.0.1:0"\n[log]\nlevel = "warn"\n' "$work"
  printf '[[bus]]\nid = "sim"\nkind = "modbus-tcp"\naddress = "%s"\ntimeout_ms = 1000\n' "$addr"
  for u in $(seq 1 "$frames"); do
    printf '[[frame]]\nid = "F%s"\nbus = "sim"\nunit = %s\nring_diameter_mm = 63.5\npoll_ms = 1000\nfast_poll_ms = 1000\n' "$u" "$u"
    printf '[frame.displacement]\nregister = { table = "input", address = 0, type = "i32" }\ncalibration = { gain = 0.0001 }\n'
    printf '[frame.load]\nregister = { table = "input", address = 2, type = "i32" }\ncalibration = { gain = 0.0001 }\n'
    printf '[frame.temperature]\nregister = { table = "input", address = 4, type = "i16" }\ncalibration = { gain = 0.01 }\n'
  done
} > "$work/oedolog.toml"
"${OEDOLOG_DAEMON:-$bin/oedolog}" run --config "$work/oedolog.toml" > "$work/daemon.out" 2> "$work/daemon.err" &
daemon=$!
wait_for "$work/daemon.out" "listening on http://"
sample() { # prints: cpu_us switches
  python3 - "$daemon" << 'PY'
import glob, sys
pid = sys.argv[1]
s = open(f"/proc/{pid}/stat").read(); f = s[s.rfind(")") + 2:].split()
switches = 0
for status in glob.glob(f"/proc/{pid}/task/*/status"):
    for line in open(status):
        if line.startswith(("voluntary_ctxt_switches", "nonvoluntary_ctxt_switches")):
            switches += int(line.split()[1])
print((int(f[11]) + int(f[12])) * 10000, switches)
PY
}
sleep 3
read -r c0 w0 < <(sample); t0=$(date +%s.%N)
sleep "$seconds"
read -r c1 w1 < <(sample); t1=$(date +%s.%N)
threads=$(ls /proc/$daemon/task | wc -l)
python3 -c "
t=$t1-$t0
print(f'Idle: $frames frames at 1 Hz over Modbus TCP, no browser, {t:.1f} s, $threads threads')
print(f'  CPU share of one core: {($c1-$c0)/1e6/t*100:.2f} %')
print(f'  wakeups/s (context switches, all threads): {($w1-$w0)/t:.0f}  ({($w1-$w0)/t/$frames:.1f} per frame poll)')"
