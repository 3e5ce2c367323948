#!/usr/bin/env bash
# MQTT publishing and the fleet board at 50 labs (issue 16, Benchmarks), through one local Debian mosquitto:
#   - lab00 is one real `oedolog run` polling 32 frames of the simulator over Modbus TCP at 1 poll/s each
#     (poll_ms = 1000; 3 channel readings per poll), publishing with [[publish.mqtt]];
#   - lab01…lab49 are daemon/examples/mqtt_load.rs (`gen`): 32 frames each, one poll's 3 readings per frame
#     per second, the daemon's topics and payloads (its labs are told apart by name and by
#     `"version": "mqtt_load"` in their status);
#   - a consumer (mqtt_load `consume`) subscribed to PREFIX/# records, for every reading of lab00, its
#     receive time and the reading's `at_us`. The payload carries the acquisition stamp, not the store's
#     commit time, so two lags are given: "acquisition stamp → consumer" (includes the writer's wait of up
#     to flush_ms = 500 before a commit and the publisher's 500 ms tail interval, PublishPolicy::poll), and
#     "store commit → consumer", with the commit taken as the first line `oedolog run --report-commits`
#     printed (stamped on arrival) at or after the reading's stamp: no later than the commit that held it,
#     so an upper bound (both runs use --report-commits, a line or two a second).
# Figures: lag p50/p99/max (and per phase, to see growth), readings received vs stored once publishing has
# settled (nothing may be missing), the daemon's CPU per stored reading without publishing against its extra
# CPU per published reading (the same frames for the same SECONDS, run once without and once with
# [[publish.mqtt]]; CPU is utime + stime of the whole process, all threads, from /proc/PID/stat, proc(5),
# in 10 ms ticks, cross-checked by the ns of /proc/PID/task/*/schedstat; the daemon pinned to one CPU,
# everything else to the other), the first payload of each kind from lab00 and lab01 against docs/mqtt's
# JSON Schemas (python-jsonschema of the peers venv, when built), and the fleet board's p99 at
# 50 connections (wrk, Debian's, 2 threads, on the daemon's CPU once its CPU window is over; the board on
# the broker's) on GET / and GET /api/fleet while the 50 labs (1600 frames) publish.
# No targets: the issue asks for the figures. Not part of tests/run.sh (benchmarks are not timed tests).
#   tests/bench/mqtt-fleet.sh [SECONDS]     (default 20; installs mosquitto and wrk with apt-get if root)
#   BOARD_GZIP=1 tests/bench/mqtt-fleet.sh  wrk and the one-client timings send `Accept-Encoding: gzip` (the
#                                           board compresses then; wrk asks for nothing by default, nor does
#                                           this script)
set -euo pipefail
cd "$(dirname "${BASH_SOURCE[0]}")/../.."
seconds=${1:-20}
frames=32
labs=50
prefix=bench/soil
target=${CARGO_TARGET_DIR:-target}
for cmd in curl python3 taskset; do
  command -v "$cmd" > /dev/null || { echo "mqtt-fleet.sh: $cmd is missing" >&2; exit 1; }
done
need_pkg() { # COMMAND PACKAGE
  command -v "$1" > /dev/null || [ -x "/usr/sbin/$1" ] && return 0
  [ "$(id -u)" -eq 0 ] || { echo "mqtt-fleet.sh: needs $2 (sudo apt-get install -y $2)" >&2; exit 1; }
  DEBIAN_FRONTEND=noninteractive apt-get install -y -q --no-install-recommends "$2" > /dev/null \
    || { apt-get update > /dev/null && DEBIAN_FRONTEND=noninteractive apt-get install -y -q --no-install-recommends "$2" > /dev/null; }
}
need_pkg mosquitto mosquitto
need_pkg wrk wrk
mosquitto_bin=$(command -v mosquitto || echo /usr/sbin/mosquitto)
cargo build --release -p oedolog -p oedolog-sim --bins --example mqtt_load -q
bin="$target/release"
work=$(mktemp -d)
cleanup() {
  local pids
  pids=$(jobs -p)
  [ -n "$pids" ] && kill $pids 2> /dev/null || true
  wait 2> /dev/null || true
  if [ -n "${KEEP_WORK:-}" ]; then echo "mqtt-fleet.sh: kept $work" >&2; else rm -rf "$work"; fi
}
trap cleanup EXIT

wait_for() { # FILE PATTERN
  for _ in $(seq 150); do grep -q "$2" "$1" 2> /dev/null && return 0; sleep 0.1; done
  echo "mqtt-fleet.sh: no '$2' in $1:" >&2; cat "$1" >&2; return 1
}
cpu_ticks() { # PID: utime + stime, clock ticks (USER_HZ = 100)
  python3 -c "
s=open('/proc/$1/stat').read(); f=s[s.rfind(')')+2:].split()
print(int(f[11])+int(f[12]))"
}
free_port() { python3 -c 'import socket; s=socket.socket(); s.bind(("127.0.0.1", 0)); print(s.getsockname()[1])'; }
metric() { # HTTP NAME: the value of NAME{…} in /metrics
  curl -s "http://$1/metrics" | awk -v n="$2" 'index($0, n "{") == 1 && !done {print $NF; done = 1}'
}
stored_rows() { python3 -c "import sqlite3,sys; print(sqlite3.connect(sys.argv[1]).execute('select count(*) from readings').fetchone()[0])" "$1"; }
now() { date +%s%6N; }

cpus=$(nproc)
daemon_cpu=$((cpus > 1 ? 1 : 0))
other_cpu=0

# The broker: a throw-away configuration; no persistence; queues big enough that no message for the
# consumer is ever dropped (mosquitto.conf(5): max_queued_messages, default 1000; max_inflight_messages).
port=$(free_port)
cat > "$work/mosquitto.conf" << EOF
listener $port 127.0.0.1
allow_anonymous true
persistence false
max_queued_messages 1000000
max_inflight_messages 0
log_dest stderr
EOF
taskset -c $other_cpu "$mosquitto_bin" -c "$work/mosquitto.conf" > /dev/null 2> "$work/mosquitto.err" < /dev/null &
wait_for "$work/mosquitto.err" " running"
mosquitto_version=$({ "$mosquitto_bin" -h 2>&1 || true; } | sed -n '1s/^mosquitto version //p') # -h exits 3

taskset -c $other_cpu "$bin/oedolog-sim" --frames "$frames" --schedule manual --tcp 127.0.0.1:0 > "$work/sim.out" 2> /dev/null < /dev/null &
sim=$!
wait_for "$work/sim.out" "listening on tcp"
addr=$(sed -n 's/^listening on tcp //p' "$work/sim.out")

config() { # DIR PUBLISH(0|1)
  printf '[store]\npath = "%s/lab.sqlite"\n[http]\nlisten = "127.0.0.1:0"\n[log]\nlevel = "warn"\n' "$1"
  printf '[[bus]]\nid = "sim"\nkind = "modbus-tcp"\naddress = "%s"\ntimeout_ms = 1000\n' "$addr"
  for u in $(seq 1 "$frames"); do
    printf '[[frame]]\nid = "F%s"\nbus = "sim"\nunit = %s\nring_diameter_mm = 63.5\npoll_ms = 1000\nfast_poll_ms = 1000\n' "$u" "$u"
    printf '[frame.displacement]\nregister = { table = "input", address = 0, type = "i32" }\ncalibration = { gain = 0.0001 }\n'
    printf '[frame.load]\nregister = { table = "input", address = 2, type = "i32" }\ncalibration = { gain = 0.0001 }\n'
    printf '[frame.temperature]\nregister = { table = "input", address = 4, type = "i16" }\ncalibration = { gain = 0.01 }\n'
  done
  if [ "$2" = 1 ]; then
    printf '[[publish.mqtt]]\nurl = "mqtt://127.0.0.1:%s"\nclient_id = "benchlab00"\ntopic_prefix = "%s"\nlab = "lab00"\n' "$port" "$prefix"
  fi
}

# The daemon's stdout, each line prefixed with the µs it arrived (system clock): with --report-commits a
# line follows each durable commit, so the first one at or after a reading's stamp is no later than
# the commit that held it.
stamp_py='
import sys, time
for line in sys.stdin:
    sys.stdout.write(f"{time.time_ns() // 1000} {line}")
    sys.stdout.flush()'
start_daemon() { # DIR: sets daemon, http
  taskset -c $daemon_cpu "$bin/oedolog" run --report-commits --config "$1/oedolog.toml" \
    > >(taskset -c $daemon_cpu python3 -u -c "$stamp_py" > "$1/daemon.out") 2> "$1/daemon.err" < /dev/null &
  daemon=$!
  wait_for "$1/daemon.out" "listening on http://"
  http=$(sed -n 's#^[0-9]* listening on http://\(.*\)/$#\1#p' "$1/daemon.out")
}

# Per thread: "tid ns_on_cpu" (/proc/PID/task/TID/schedstat, first field; sched-stats.rst). A finer
# cross-check of the ticks, blind to a thread that ends inside the window.
thread_ns() { for t in /proc/$1/task/*; do echo "${t##*/} $(cut -d' ' -f1 "$t/schedstat" 2> /dev/null || echo 0)"; done; }
# One window of SECONDS after a 3 s warm-up: prints "ticks stored_rows published t0_us t1_us ns".
window() { # DIR
  sleep 3
  local c0 c1 r0 r1 t0 t1 p0 p1
  thread_ns $daemon > "$1/ns0"
  c0=$(cpu_ticks $daemon); r0=$(stored_rows "$1/lab.sqlite"); p0=$(metric "$http" oedolog_publish_readings_total); t0=$(now)
  sleep "$seconds"
  c1=$(cpu_ticks $daemon); r1=$(stored_rows "$1/lab.sqlite"); p1=$(metric "$http" oedolog_publish_readings_total); t1=$(now)
  thread_ns $daemon > "$1/ns1"
  ns=$(awk 'NR == FNR {a[$1] = $2; next} {d += $2 - ($1 in a ? a[$1] : 0)} END {print d}' "$1/ns0" "$1/ns1")
  echo "$((c1 - c0)) $((r1 - r0)) $((${p1:-0} - ${p0:-0})) $t0 $t1 $ns"
}

# 1. The daemon without publishing.
echo "== run A: oedolog run, $frames frames at 1 poll/s, no [[publish.mqtt]], ${seconds} s"
mkdir -p "$work/a" "$work/b"
config "$work/a" 0 > "$work/a/oedolog.toml"
start_daemon "$work/a"
read -r a_ticks a_rows _ _ _ a_ns < <(window "$work/a")
kill $daemon; wait $daemon 2> /dev/null || true
echo "   $a_ticks ticks ($a_ns ns on CPU by schedstat), $a_rows rows stored"

# 2. The consumer, the 49 generated labs and the fleet board.
mkdir -p "$work/kept"
taskset -c $other_cpu "$bin/examples/mqtt_load" consume --port "$port" --prefix "$prefix" --lab lab00 \
  --samples "$work/samples.txt" --keep "$work/kept" --counts "$work/consumed.json" 2> "$work/consume.err" &
consumer=$!
sleep 1
taskset -c $other_cpu "$bin/examples/mqtt_load" gen --port "$port" --prefix "$prefix" --first 1 --labs $((labs - 1)) \
  --frames "$frames" --period-ms 1000 --counts "$work/generated.json" 2> "$work/gen.err" &
gen=$!
printf '[fleet]\nquiet_after_s = 300\n[[fleet.broker]]\nurl = "mqtt://127.0.0.1:%s"\nclient_id = "benchfleet"\ntopic_prefix = "%s"\n[http]\nlisten = "127.0.0.1:0"\n[log]\nlevel = "warn"\n' \
  "$port" "$prefix" > "$work/fleet.toml"
taskset -c $other_cpu "$bin/oedolog" fleet --config "$work/fleet.toml" > "$work/fleet.out" 2> "$work/fleet.err" < /dev/null &
fleet=$!
wait_for "$work/fleet.out" "listening on http://"
board=$(sed -n 's#^listening on http://\(.*\)/$#\1#p' "$work/fleet.out")

# 3. The daemon publishing as lab00, the same frames for the same time.
echo "== run B: the same with [[publish.mqtt]] as lab00, 49 generated labs on the broker, ${seconds} s"
config "$work/b" 1 > "$work/b/oedolog.toml"
start_daemon "$work/b"
read -r b_ticks b_rows b_pub b_t0 b_t1 b_ns < <(window "$work/b")
echo "   $b_ticks ticks ($b_ns ns on CPU by schedstat), $b_rows rows stored, $b_pub readings published in the window"

# 4. The fleet board at 50 connections while the 50 labs publish.
to_ms() { python3 -c "
import re, sys
m = re.fullmatch(r'([0-9.]+)(us|ms|s|m)', sys.argv[1])
print('%.2f' % (float(m[1]) * {'us': 1e-3, 'ms': 1.0, 's': 1e3, 'm': 6e4}[m[2]]))" "$1"; }
curl -sf "http://$board/api/fleet" -o "$work/fleet.json"
read -r board_labs board_frames board_per_lab board_online < <(python3 - "$work/fleet.json" << 'PY'
import collections, json, sys
v = json.load(open(sys.argv[1]))
per = collections.Counter(f["lab"] for f in v["frames"])
print(len(v["labs"]), len(v["frames"]), ",".join(sorted({str(n) for n in per.values()})),
      sum(l["status"] == "online" for l in v["labs"]))
PY
)
page_bytes=$(curl -sf -o /dev/null -w '%{size_download}' "http://$board/")
api_bytes=$(curl -sf -o /dev/null -w '%{size_download}' "http://$board/api/fleet")
gzip_h=()
[ -n "${BOARD_GZIP:-}" ] && gzip_h=(-H 'Accept-Encoding: gzip')
page_gz=$(curl -sf -H 'Accept-Encoding: gzip' -o /dev/null -w '%{size_download}' "http://$board/")
api_gz=$(curl -sf -H 'Accept-Encoding: gzip' -o /dev/null -w '%{size_download}' "http://$board/api/fleet")
echo "== the board: $board_labs labs ($board_online online), $board_frames frames, frames per lab {$board_per_lab}; page $page_bytes bytes ($page_gz gzipped), /api/fleet $api_bytes bytes ($api_gz gzipped)"
w_t0=$(now)
wrk_rows=()
for path in / /api/fleet; do
  serial=$(for _ in $(seq 20); do curl -s "${gzip_h[@]}" -o /dev/null -w '%{time_total}\n' "http://$board$path"; done |
    sort -n | awk '{t[NR] = $1 * 1000} END {printf "%.2f", t[int((NR + 1) / 2)]}')
  echo "== wrk -c 50 -t 2 -d ${seconds}s --timeout 10s --latency ${gzip_h[*]:+-H '${gzip_h[1]}' }$path"
  taskset -c $daemon_cpu wrk -c 50 -t 2 -d "${seconds}s" --timeout 10s --latency "${gzip_h[@]}" "http://$board$path" > "$work/wrk.out"
  grep -E "Latency|50%|99%|Requests/sec|Non-2xx|Socket errors" "$work/wrk.out" | sed 's/^/   /'
  p50=$(to_ms "$(awk '$1 == "50%" {print $2}' "$work/wrk.out")")
  p99=$(to_ms "$(awk '$1 == "99%" {print $2}' "$work/wrk.out")")
  rps=$(awk '/^Requests\/sec:/ {print $2}' "$work/wrk.out")
  bad=$(awk '/Non-2xx or 3xx responses:/ {print $5}' "$work/wrk.out")
  wrk_rows+=("$(printf '  GET %-10s 1 client %7s ms   p50 %8s ms   p99 %8s ms   %9s req/s%s' "$path" "$serial" "$p50" "$p99" "$rps" "${bad:+, $bad non-2xx}")")
done
w_t1=$(now)
curl -sf "http://$board/api/fleet" -o "$work/fleet2.json"
read -r board2_labs board2_frames < <(python3 -c "import json,sys; v=json.load(open(sys.argv[1])); print(len(v['labs']), len(v['frames']))" "$work/fleet2.json")

# 5. Settle: the simulator stops, acquisition stops, publishing catches up; then compare.
kill $sim; wait $sim 2> /dev/null || true
settled=no
for _ in $(seq 60); do
  sleep 1
  lag=$(metric "$http" oedolog_publish_lag_seconds)
  s1=$(stored_rows "$work/b/lab.sqlite")
  pub=$(metric "$http" oedolog_publish_readings_total)
  echo "$(now) lag=$lag published=$pub stored=$s1 connected=$(metric "$http" oedolog_publish_connected) errors=$(metric "$http" oedolog_publish_errors_total)" >> "$work/settle.txt"
  if python3 -c "import sys; sys.exit(not (float(sys.argv[1]) == 0 and float(sys.argv[2]) >= int(sys.argv[3])))" "$lag" "$pub" "$s1"; then
    settled=yes
    break
  fi
done
sleep 2
stored=$(stored_rows "$work/b/lab.sqlite")
published=$(metric "$http" oedolog_publish_readings_total)
kill -TERM $gen; wait $gen 2> /dev/null || true
sleep 1
kill -TERM $consumer; wait $consumer 2> /dev/null || true
kill $daemon; wait $daemon 2> /dev/null || true

python3 - "$work" "$seconds" "$frames" "$a_ticks" "$a_rows" "$b_ticks" "$b_rows" "$a_ns" "$b_ns" "$b_pub" "$b_t0" "$b_t1" \
  "$w_t0" "$w_t1" "$stored" "$published" "$settled" "$board_labs" "$board_frames" "$board_per_lab" "$board_online" \
  "$board2_labs" "$board2_frames" "$page_bytes" "$api_bytes" "$cpus" "$mosquitto_version" "$*" "$page_gz" "$api_gz" \
  "${BOARD_GZIP:+gzip}" << 'PY' > "$work/summary.txt"
import json, sys
a = sys.argv[1:]
work, seconds, frames = a[0], int(a[1]), int(a[2])
a_ticks, a_rows, b_ticks, b_rows, a_ns, b_ns, pub_in_window = map(int, a[3:10])
b_t0, b_t1, w_t0, w_t1 = map(int, a[10:14])
stored, published, settled = int(a[14]), int(float(a[15])), a[16]
board_labs, board_frames, per_lab, online, board2_labs, board2_frames, page_bytes, api_bytes = a[17:25]
cpus, mosq, args = a[25], a[26], a[27]
page_gz, api_gz, asked = a[28], a[29], a[30]

import bisect
commits = sorted(int(l.split()[0]) for l in open(f"{work}/b/daemon.out") if " committed " in l)
rows = [l.split() for l in open(f"{work}/samples.txt")]
seen, dups, lags, clags, uncommitted = set(), 0, [], [], 0
for recv, at, frame, channel, seq in rows:
    key = (frame, channel, int(seq))
    if key in seen:
        dups += 1
        continue
    seen.add(key)
    lags.append((int(recv), (int(recv) - int(at)) / 1e3))
    i = bisect.bisect_left(commits, int(at))
    if i < len(commits):
        clags.append((int(recv), (int(recv) - commits[i]) / 1e3))
    else:
        uncommitted += 1
def pct(xs, q):
    xs = sorted(xs)
    return xs[min(len(xs) - 1, int(q * len(xs)))] if xs else float("nan")
def line(name, xs):
    return f"  {name:<40} {len(xs):6d} readings  p50 {pct(xs, .5):7.1f} ms  p99 {pct(xs, .99):7.1f} ms  max {max(xs) if xs else float('nan'):7.1f} ms"
b_mid = (b_t0 + b_t1) // 2

gen = json.load(open(f"{work}/generated.json"))
got = json.load(open(f"{work}/consumed.json"))
gen_m = sum(v["messages"] for v in gen.values())
gen_r = sum(v["readings"] for v in gen.values())
got_m = sum(v["messages"] for k, v in got.items() if k in gen)
got_r = sum(v["readings"] for k, v in got.items() if k in gen)
lab00 = got.get("lab00", {"messages": 0, "readings": 0})

def cpu(a_us, b_us):
    per_stored = a_us / a_rows
    extra = (b_us - b_rows * per_stored) / pub_in_window if pub_in_window else float("nan")
    return per_stored, extra
a_cpu_us, b_cpu_us = a_ticks * 1e4, b_ticks * 1e4
per_stored, extra = cpu(a_cpu_us, b_cpu_us)
ns_stored, ns_extra = cpu(a_ns / 1e3, b_ns / 1e3)
print(f"== summary: {'BOARD_GZIP=1 ' if asked else ''}tests/bench/mqtt-fleet.sh {args}".rstrip())
print(f"machine: {cpus} CPUs, mosquitto {mosq}; the daemon (and later wrk) pinned to one CPU; broker, simulator, load, consumer and board to the other")
print(f"labs: lab00 = oedolog run ({frames} frames of oedolog-sim over Modbus TCP, poll_ms = 1000, 3 readings a poll) + lab01…lab{len(gen):02d} from mqtt_load gen ({frames} frames each, same rate and payloads)")
def phases(pairs):
    print(line("whole run", [l for _, l in pairs]))
    print(line(f"CPU window ({seconds} s)", [l for r, l in pairs if b_t0 <= r < b_t1]))
    print(line("  its first half", [l for r, l in pairs if b_t0 <= r < b_mid]))
    print(line("  its second half", [l for r, l in pairs if b_mid <= r < b_t1]))
    print(line("during wrk on the board", [l for r, l in pairs if w_t0 <= r < w_t1]))
print("lag, store commit → consumer (commit = the first --report-commits line at or after the reading's stamp, an")
print("  upper bound; the publisher reads the store every 500 ms):")
phases(clags)
print("lag, acquisition stamp → consumer (adds the wait for the writer's commit, flush_ms = 500):")
phases(lags)
if uncommitted:
    print(f"  ({uncommitted} readings came after the last commit line: NO COMMIT LINE)")
ok = settled == "yes" and len(seen) == stored
print(f"lab00 readings: stored {stored}, published (acknowledged) {published}, received distinct {len(seen)} "
      f"({dups} repeats dropped by seq): {'nothing missing' if len(seen) >= stored else 'MISSING ' + str(stored - len(seen))}"
      f"{'' if settled == 'yes' else ' (publishing had not settled)'}")
print(f"generated labs: published {gen_m} messages / {gen_r} readings, consumer received {got_m} / {got_r}"
      f"{'' if got_m >= gen_m else ' — LOST ' + str(gen_m - got_m)}")
print(f"CPU (utime+stime, {seconds} s windows after a 3 s warm-up; a tick is 10 ms, so each count is ±1 tick):")
print(f"  without publishing: {a_ticks} ticks, {a_rows} stored → {per_stored:6.1f} µs per stored reading")
print(f"  with publishing   : {b_ticks} ticks, {b_rows} stored, {pub_in_window:.0f} published → "
      f"{b_cpu_us / b_rows:6.1f} µs per stored reading all told")
print(f"  extra per published reading: ({b_cpu_us:.0f} − {b_rows} × {per_stored:.1f}) µs ÷ {pub_in_window:.0f} = {extra:6.1f} µs; "
      f"ratio extra per published ÷ per stored = {extra / per_stored:4.2f}")
print(f"  cross-check by schedstat (ns on CPU, threads alive at the window's end): {ns_stored:6.1f} µs per stored reading, "
      f"extra {ns_extra:6.1f} µs per published reading, ratio {ns_extra / ns_stored:4.2f}")
print(f"fleet board: {board_labs} labs ({online} online), {board_frames} frames, frames per lab {{{per_lab}}} before wrk; "
      f"{board2_labs} labs, {board2_frames} frames after; page {page_bytes} bytes, /api/fleet {api_bytes} bytes "
      f"({page_gz} / {api_gz} gzipped); wrk {'sends Accept-Encoding: gzip' if asked else 'asks for no encoding (BOARD_GZIP=1 asks for gzip)'}")
PY
printf '%s\n' "${wrk_rows[@]}" >> "$work/summary.txt"
# The first payload of each kind from the daemon (lab00) and the generator (lab01) against docs/mqtt's
# JSON Schemas, with python-jsonschema from the peers venv that tests/run.sh builds (skipped without it).
venv_python=target/peers-venv/bin/python
if [ -x "$venv_python" ] && "$venv_python" -c 'import jsonschema' 2> /dev/null; then
  "$venv_python" - "$work/kept" << 'PY' >> "$work/summary.txt"
import json, sys
from jsonschema import Draft202012Validator
out = []
for lab in ("lab00", "lab01"):
    words = []
    for kind in ("status", "state", "readings", "events"):
        schema = json.load(open(f"docs/mqtt/{kind}.schema.json"))
        try:
            payload = json.load(open(f"{sys.argv[1]}/{lab}-{kind}.json"))
        except FileNotFoundError:
            words.append(f"{kind} none received")
            continue
        errors = [e.message for e in Draft202012Validator(schema).iter_errors(payload)]
        words.append(f"{kind} ok" if not errors else f"{kind} INVALID ({errors[0][:120]})")
    out.append(f"{lab}: " + ", ".join(words))
print("payloads against docs/mqtt/*.schema.json: " + "; ".join(out))
PY
else
  echo "payloads against docs/mqtt/*.schema.json: not checked (no $venv_python with jsonschema; tests/run.sh builds it)" >> "$work/summary.txt"
fi
echo
cat "$work/summary.txt"
