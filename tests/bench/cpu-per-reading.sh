#!/usr/bin/env bash
# CPU per stored reading: `oedolog run` polling FRAMES units of the simulator over Modbus TCP as fast as
# its schedule allows (poll_ms = 1), against two baselines measured in the same run, on the same CPU:
#   - a bare rusqlite insert loop (daemon/examples/bare_insert.rs: same schema, WAL + synchronous=FULL,
#     transactions the size of the daemon's commits), CPU per reading;
#   - a libmodbus C client (tests/bench/cpu/modbus_loop.c, Debian's libmodbus-dev) reading the same
#     5 input registers of the same units, CPU per request, plus the bare insert of its 3 readings.
# CPU is utime + stime of the whole process, all threads (/proc/PID/stat, proc(5); getrusage for the
# C client), and per thread for the daemon (/proc/PID/task/TID/stat: polling = tokio workers, store
# writer, live watch). As the issue measured ("client and server pinned to one CPU"), the simulator and
# the process measured share one CPU: a request then wakes the other side on the same CPU. With
# CPU_PLACEMENT=split the simulator gets the other CPU instead; on this VM every cross-CPU wake-up is an
# inter-processor interrupt through the hypervisor, which costs the sender ~10 µs per request (perf:
# _raw_spin_unlock_irqrestore under sock_def_readable) and makes every client, libmodbus included, ~8×
# dearer per request.
# Targets (issue 15): daemon per reading ÷ bare insert per reading ≤ 2.5; daemon per request ÷
# (libmodbus per request + 3 × bare insert per reading) ≤ 2. Also prints the store bench's writer ÷ bare
# ingest ratio (target ≥ 0.8). Not part of tests/run.sh (benchmarks are not timed tests).
#   tests/bench/cpu-per-reading.sh [SECONDS] [FRAMES]     (installs libmodbus-dev with apt-get if root)
set -euo pipefail
cd "$(dirname "${BASH_SOURCE[0]}")/../.."
seconds=${1:-10}
frames=${2:-200}
target=${CARGO_TARGET_DIR:-target}
for cmd in curl python3 gcc taskset; do
  command -v "$cmd" > /dev/null || { echo "cpu-per-reading.sh: $cmd is missing" >&2; exit 1; }
done
if [ ! -f /usr/include/modbus/modbus.h ]; then
  [ "$(id -u)" -eq 0 ] || { echo "cpu-per-reading.sh: needs libmodbus-dev (sudo apt-get install -y libmodbus-dev)" >&2; exit 1; }
  DEBIAN_FRONTEND=noninteractive apt-get install -y --no-install-recommends libmodbus-dev > /dev/null \
    || { apt-get update > /dev/null && DEBIAN_FRONTEND=noninteractive apt-get install -y --no-install-recommends libmodbus-dev > /dev/null; }
fi
cargo build --release -p oedolog -p oedolog-sim --bins --example bare_insert -q
bin="$target/release"
daemon_bin=${OEDOLOG_DAEMON:-$bin/oedolog} # another build of the daemon, to compare
work=$(mktemp -d)
cleanup() {
  local pids
  pids=$(jobs -p)
  [ -n "$pids" ] && kill $pids 2> /dev/null || true
  wait 2> /dev/null || true
  rm -rf "$work"
}
trap cleanup EXIT
gcc -O2 -o "$work/modbus_loop" tests/bench/cpu/modbus_loop.c $(pkg-config --cflags --libs libmodbus 2> /dev/null || echo -I/usr/include/modbus -lmodbus)

wait_for() { # FILE PATTERN
  for _ in $(seq 100); do grep -q "$2" "$1" 2> /dev/null && return 0; sleep 0.1; done
  echo "cpu-per-reading.sh: no '$2' in $1:" >&2; cat "$1" >&2; return 1
}
cpu_us() { # PID: utime + stime, µs (USER_HZ = 100)
  python3 -c "
s=open('/proc/$1/stat').read(); f=s[s.rfind(')')+2:].split()
print((int(f[11])+int(f[12]))*10000)"
}
threads_us() { # PID: utime + stime per thread name, µs, as name=µs pairs
  python3 -c "
import os, collections
c = collections.Counter()
for t in os.listdir('/proc/$1/task'):
    try:
        s = open(f'/proc/$1/task/{t}/stat').read()
    except OSError:
        continue
    name = s[s.find('(') + 1:s.rfind(')')].replace(' ', '_')
    f = s[s.rfind(')') + 2:].split()
    c[name] += (int(f[11]) + int(f[12])) * 10000
print(' '.join(f'{k}={v}' for k, v in sorted(c.items())))"
}

cpus=$(nproc)
client_cpu=$((cpus > 1 ? 1 : 0))
case "${CPU_PLACEMENT:-shared}" in
  shared) sim_cpu=$client_cpu ;;
  split) sim_cpu=0 ;;
  *) echo "cpu-per-reading.sh: CPU_PLACEMENT is shared or split" >&2; exit 1 ;;
esac
taskset -c $sim_cpu "$bin/oedolog-sim" --frames "$frames" --schedule manual --tcp 127.0.0.1:0 > "$work/sim.out" 2> /dev/null < /dev/null &
wait_for "$work/sim.out" "listening on tcp"
addr=$(sed -n 's/^listening on tcp //p' "$work/sim.out")

# The daemon.
{
  printf '[store]\npath = "%s/lab.sqlite"\n[http]\nlisten = "127.0.0.1:0"\n[log]\nlevel = "warn"\n' "$work"
  printf '[[bus]]\nid = "sim"\nkind = "modbus-tcp"\naddress = "%s"\ntimeout_ms = 1000\n' "$addr"
  for u in $(seq 1 "$frames"); do
    printf '[[frame]]\nid = "F%s"\nbus = "sim"\nunit = %s\nring_diameter_mm = 63.5\npoll_ms = 1\nfast_poll_ms = 1\n' "$u" "$u"
    printf '[frame.displacement]\nregister = { table = "input", address = 0, type = "i32" }\ncalibration = { gain = 0.0001 }\n'
    printf '[frame.load]\nregister = { table = "input", address = 2, type = "i32" }\ncalibration = { gain = 0.0001 }\n'
    printf '[frame.temperature]\nregister = { table = "input", address = 4, type = "i16" }\ncalibration = { gain = 0.01 }\n'
  done
} > "$work/oedolog.toml"
taskset -c $client_cpu "$daemon_bin" run --config "$work/oedolog.toml" > "$work/daemon.out" 2> "$work/daemon.err" &
daemon=$!
wait_for "$work/daemon.out" "listening on http://"
http=$(sed -n 's#^listening on http://\(.*\)/$#\1#p' "$work/daemon.out")
counters() { curl -s "http://$http/api/frames" | python3 -c 'import json,sys
fs=json.load(sys.stdin)
print(sum(f["counters"]["requests"] for f in fs), sum(f["counters"]["readings"] for f in fs))'; }
sleep 2
read -r q0 r0 < <(counters); c0=$(cpu_us $daemon); h0=$(threads_us $daemon); t0=$(date +%s.%N)
sleep "$seconds"
read -r q1 r1 < <(counters); c1=$(cpu_us $daemon); h1=$(threads_us $daemon); t1=$(date +%s.%N)
if [ -n "${PERF_OUT:-}" ]; then
  perf record -F 2000 -g -p $daemon -o "$PERF_OUT" -- sleep 5 > /dev/null 2>&1 || true
fi
read -r _ handed < <(counters)
kill $daemon; wait $daemon 2> /dev/null || true
# Every reading handed to the store is committed by the stop (more come between the count and the kill).
stored=$(python3 -c "import sqlite3; print(sqlite3.connect('$work/lab.sqlite').execute('select count(*) from readings').fetchone()[0])")

# Baselines, same CPU as the daemon.
daemon_rate=$(python3 -c "print(($r1-$r0)/($t1-$t0))")
batch=$(python3 -c "print(max(1, int($daemon_rate*0.5)))") # the writer commits every 500 ms under load
bare=$(taskset -c $client_cpu "$bin/examples/bare_insert" "$work/bare.sqlite" $((r1 - r0)) "$batch" "$frames")
client=$(taskset -c $client_cpu "$work/modbus_loop" "${addr%:*}" "${addr##*:}" "$frames" "$seconds")

python3 - "$q0" "$q1" "$r0" "$r1" "$c0" "$c1" "$t0" "$t1" "$stored" "$handed" "$bare" "$client" "$frames" "$h0" "$h1" "${CPU_PLACEMENT:-shared}" << 'PY'
import sys
q0, q1, r0, r1, c0, c1 = map(int, sys.argv[1:7])
t0, t1 = map(float, sys.argv[7:9])
stored, handed = int(sys.argv[9]), int(sys.argv[10])
kv = lambda s: {k: float(v) for k, v in (p.split("=") for p in s.split())}
bare, client, frames = kv(sys.argv[11]), kv(sys.argv[12]), sys.argv[13]
h0, h1, placement = kv(sys.argv[14]), kv(sys.argv[15]), sys.argv[16]
req, rd, cpu = q1 - q0, r1 - r0, c1 - c0
d_read = cpu / rd
d_req = cpu / req
b_read = bare["cpu_us_per_reading"]
m_req = client["cpu_us"] / client["requests"]
print(f"CPU per reading, {frames} units over Modbus TCP, {t1 - t0:.1f} s window (utime+stime, all threads), "
      f"simulator and client on {'one CPU' if placement == 'shared' else 'separate CPUs'}")
print(f"  daemon          : {req / (t1 - t0):8.0f} requests/s, {rd / (t1 - t0):8.0f} readings/s, "
      f"{cpu / 1e4 / (t1 - t0):5.1f} % of a CPU")
print(f"  daemon          : {d_req:6.2f} µs CPU per request, {d_read:6.2f} µs per stored reading")
per = {k: (h1.get(k, 0) - h0.get(k, 0)) / rd for k in h1}
polling = sum(v for k, v in per.items() if k.startswith(("tokio", "oedolog-rtu", "oedolog-tcp")))
writer, watch = per.get("oedolog-store", 0), per.get("oedolog-watch", 0)
print(f"  daemon threads  : polling {polling:5.2f}, store writer {writer:5.2f}, live watch {watch:5.2f}, "
      f"other {d_read - polling - writer - watch:5.2f} µs per stored reading")
print(f"  bare rusqlite   : {b_read:6.2f} µs CPU per reading ({int(bare['readings'])} readings)")
print(f"  libmodbus client: {m_req:6.2f} µs CPU per request ({int(client['requests'])} requests, "
      f"{int(client['errors'])} errors)")
print(f"  stored rows {stored} ≥ readings handed to the store before the stop {handed}: "
      f"{'ok' if stored >= handed else 'LOST READINGS'}")
print(f"ratio daemon/bare insert per reading          : {d_read / b_read:5.2f}  (target ≤ 2.5)")
print(f"ratio store writer/bare insert per reading    : {writer / b_read:5.2f}")
print(f"ratio daemon/(libmodbus + 3 × bare) per request: {d_req / (m_req + 3 * b_read):5.2f}  (target ≤ 2)")
PY
if [ -z "${SKIP_STORE_BENCH:-}" ]; then
  cargo bench -p oedolog --bench store -q -- 300000 2>&1 | grep -i "ratio\|readings/s" || true
fi
