#!/usr/bin/env bash
# Serial-line efficiency: transactions per second on one simulated RS-485 line (`oedolog-sim --rtu PATH
# --line-timing` on a socat pty pair) for the daemon, mbpoll and the pymodbus 3.16.1 serial client, each
# divided by the line's limit, at 9 600, 19 200 and 115 200 baud, 8E1 and 8N2, with 1, 8 and 32 units.
# All clients read the same 5 input registers (FC 04: an 8-byte request, a 15-byte reply) of units 1..N
# in turn, one request at a time, on the same simulator in the same run.
#
# The limit (Modbus over Serial Line V1.02, §2.5.1 and §2.5.1.1): an 11-bit character for 8E1 and 8N2,
# char = 11 / baud; t3.5 = 3.5 chars, fixed at 1.750 ms above 19 200 baud; one transaction = (8 + 15)
# chars + 2 × t3.5 (after the request, and before the next one); no device turnaround.
# Check value (computed): 19 200 baud → 23 × 0.5729 ms + 2 × 2.0052 ms = 17.187 ms → 58.18 tx/s.
#
# Counted: transactions answered (requests − timeouts − CRC errors − refused frames for the daemon, from
# /api/frames; lines of register 0 printed for mbpoll; non-error replies for pymodbus).
# Not part of tests/run.sh (benchmarks are not timed tests). Targets (issue 15): daemon ÷ limit ≥ 0.9 at
# 19 200 baud with 8 and 32 units; daemon ÷ best peer ≥ 1.0.
#   tests/bench/line-efficiency.sh [SECONDS]     (needs socat, mbpoll, target/peers-venv from tests/run.sh)
# A subset: LINE_BAUDS="19200" LINE_FRAMINGS="8E1" LINE_UNITS="8 32" tests/bench/line-efficiency.sh 3
set -euo pipefail
cd "$(dirname "${BASH_SOURCE[0]}")/../.."
seconds=${1:-4}
target=${CARGO_TARGET_DIR:-target}
venv=target/peers-venv
for cmd in socat mbpoll curl python3; do
  command -v "$cmd" > /dev/null || { echo "line-efficiency.sh: $cmd is missing (tests/run.sh installs it)" >&2; exit 1; }
done
[ -x "$venv/bin/python" ] || { echo "line-efficiency.sh: no $venv; run tests/run.sh once" >&2; exit 1; }
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

wait_for() { # FILE PATTERN: up to 10 s for PATTERN to appear in FILE
  for _ in $(seq 100); do grep -q "$2" "$1" 2> /dev/null && return 0; sleep 0.1; done
  echo "line-efficiency.sh: no '$2' in $1:" >&2; cat "$1" >&2; return 1
}

# Limit and the daemon's poll period for a line: the schedule must never be what holds the daemon back,
# so each frame's period is at most the round of all units at the limit (and at least 1 ms).
limit() { python3 -c "
b=$1; c=11/b; t35=3.5*c if b<=19200 else 1.75e-3
print(1/(23*c+2*t35))"; }
poll_ms() { python3 -c "
import math
b=$1; u=$2; c=11/b; t35=3.5*c if b<=19200 else 1.75e-3
r=u*(23*c+2*t35)*1000
print(10 if r>=10 else max(1, math.ceil(r)))"; }

daemon_rate() { # DEVICE BAUD PARITY STOP UNITS
  local dir="$work/daemon" parity=$3
  rm -rf "$dir"; mkdir -p "$dir"
  {
    printf '[store]\npath = "%s/lab.sqlite"\n[http]\nlisten = "127.0.0.1:0"\n[log]\nlevel = "warn"\n' "$dir"
    printf '[[bus]]\nid = "line"\nkind = "modbus-rtu"\ndevice = "%s"\nbaud = %s\nparity = "%s"\nstop_bits = %s\ntimeout_ms = 200\n' \
      "$1" "$2" "$parity" "$4"
    local p; p=$(poll_ms "$2" "$5")
    for u in $(seq 1 "$5"); do
      printf '[[frame]]\nid = "F%s"\nbus = "line"\nunit = %s\nring_diameter_mm = 63.5\npoll_ms = %s\nfast_poll_ms = %s\n' "$u" "$u" "$p" "$p"
      printf '[frame.displacement]\nregister = { table = "input", address = 0, type = "i32" }\ncalibration = { gain = 0.0001 }\n'
      printf '[frame.load]\nregister = { table = "input", address = 2, type = "i32" }\ncalibration = { gain = 0.0001 }\n'
      printf '[frame.temperature]\nregister = { table = "input", address = 4, type = "i16" }\ncalibration = { gain = 0.01 }\n'
    done
  } > "$dir/oedolog.toml"
  "$bin/oedolog" run --config "$dir/oedolog.toml" > "$dir/out" 2> "$dir/err" &
  local pid=$!
  wait_for "$dir/out" "listening on http://" || { kill $pid; return 1; }
  local http; http=$(sed -n 's#^listening on http://\(.*\)/$#\1#p' "$dir/out")
  answered() { curl -s "http://$http/api/frames" | python3 -c 'import json,sys
fs=json.load(sys.stdin)
print(sum(f["counters"]["requests"]-f["counters"]["timeouts"]-f["counters"]["crc_errors"]-f["counters"]["bad_frames"] for f in fs))'; }
  sleep 1
  local r0 t0 r1 t1
  r0=$(answered); t0=$(date +%s.%N)
  sleep "$seconds"
  r1=$(answered); t1=$(date +%s.%N)
  kill $pid; wait $pid 2> /dev/null || true
  python3 -c "print(($r1-$r0)/($t1-$t0))"
}

mbpoll_rate() { # DEVICE BAUD PARITY STOP UNITS
  local out="$work/mbpoll.out"
  # -l 10: mbpoll's shortest poll period (it waits it after each read).
  timeout -s INT "$seconds" stdbuf -oL mbpoll -m rtu -b "$2" -P "$3" -s "$4" -d 8 -a "1:$5" -t 3 -0 -r 0 -c 5 \
    -l 10 -o 0.2 "$1" > "$out" 2>&1 || true
  python3 -c "print(sum(1 for l in open('$out') if l.startswith('[0]:'))/$seconds)"
}

pymodbus_rate() { # DEVICE BAUD PARITY STOP UNITS
  # pyserial cannot open a pty with parity (DEVELOPERS.md, Testing): it opens N; the wire time is the
  # simulator's --line-framing either way.
  "$venv/bin/python" tests/peers/line_rate.py --port "$1" --baud "$2" --parity N --stop-bits "$4" \
    --units "$5" --seconds "$seconds" | python3 -c 'import json,sys; print(json.load(sys.stdin)["rate"])'
}

rows="$work/rows"
: > "$rows"
for baud in ${LINE_BAUDS:-9600 19200 115200}; do
  for framing in ${LINE_FRAMINGS:-8E1 8N2}; do
    case $framing in 8E1) parity=even stop=1 ;; 8N2) parity=none stop=2 ;; esac
    for units in ${LINE_UNITS:-1 8 32}; do
      line="$work/line-$baud-$framing-$units"
      mkdir -p "$line"
      socat -d -d "pty,raw,echo=0,link=$line/device" "pty,raw,echo=0,link=$line/master" 2> "$line/socat.err" &
      socat_pid=$!
      wait_for "$line/socat.err" "starting data transfer loop"
      "$bin/oedolog-sim" --frames "$units" --schedule manual --rtu "$line/device" --baud "$baud" --parity "$parity" \
        --stop-bits "$stop" --line-timing --line-framing "$framing" > "$line/sim.out" 2> "$line/sim.err" < /dev/null &
      sim_pid=$!
      wait_for "$line/sim.out" "listening on rtu"
      d=$(daemon_rate "$line/master" "$baud" "$parity" "$stop" "$units")
      # The daemon stopped mid-exchange: drop the late reply waiting in the pty, so the next client starts
      # on a quiet line.
      timeout 0.3 cat "$line/master" > /dev/null || true
      m=$(mbpoll_rate "$line/master" "$baud" "$parity" "$stop" "$units")
      timeout 0.3 cat "$line/master" > /dev/null || true
      y=$(pymodbus_rate "$line/master" "$baud" "$parity" "$stop" "$units")
      kill $sim_pid $socat_pid 2> /dev/null || true
      wait $sim_pid $socat_pid 2> /dev/null || true
      echo "$baud $framing $units $(limit "$baud") $d $m $y" | tee -a "$rows" >&2
    done
  done
done

python3 - "$rows" "$seconds" << 'PY'
import sys
rows = [l.split() for l in open(sys.argv[1]) if l.strip()]
print(f"Line efficiency, FC 04 × 5 registers, {sys.argv[2]} s per client, transactions answered per second")
print(f"{'baud':>7} {'frame':>5} {'units':>5} {'limit':>7} {'daemon':>7} {'mbpoll':>7} {'pymodbus':>8} "
      f"{'d/limit':>7} {'m/limit':>7} {'p/limit':>7} {'d/best':>6}")
for baud, framing, units, limit, d, m, p in rows:
    limit, d, m, p = map(float, (limit, d, m, p))
    best = max(m, p)
    print(f"{baud:>7} {framing:>5} {units:>5} {limit:7.2f} {d:7.2f} {m:7.2f} {p:8.2f} "
          f"{d/limit:7.3f} {m/limit:7.3f} {p/limit:7.3f} {d/best if best else float('inf'):6.2f}")
PY
