#!/usr/bin/env bash
# HTTP load against `oedolog run` on a seeded database (issue 5, Benchmarks): 32 frames, ~6.9 million
# stored readings, 50 concurrent clients on loopback with wrk (Debian's). Prints p99 per route against
# its target and the dashboard page weight. Not part of tests/run.sh (benchmarks are not timed tests).
#   tests/bench/http-load.sh [SECONDS]      (default 15 s per route; installs wrk with apt-get if missing)
# Targets: overview p99 <= 10 ms; downsampled increment readings p99 <= 30 ms; page weight <= 300 KB.
set -euo pipefail
cd "$(dirname "${BASH_SOURCE[0]}")/../.."
seconds=${1:-15}
connections=50
threads=2
frames=32

if ! command -v wrk > /dev/null; then
  if [ "$(id -u)" = 0 ]; then
    DEBIAN_FRONTEND=noninteractive apt-get install -y -q wrk > /dev/null
  else
    echo "wrk is missing: apt-get install wrk (as root)" >&2
    exit 1
  fi
fi
cargo build --release -p oedolog --bin oedolog --example seed_db -q

work=$(mktemp -d)
daemon=
cleanup() {
  if [ -n "$daemon" ]; then kill "$daemon" 2> /dev/null || true; wait "$daemon" 2> /dev/null || true; fi
  rm -rf "$work"
}
trap cleanup EXIT

echo "== seeding $work/lab.sqlite through the store's writer"
target/release/examples/seed_db "$work/lab.sqlite"
readings=$(python3 -c "import sqlite3,sys; print(sqlite3.connect(sys.argv[1]).execute('select count(*) from readings').fetchone()[0])" "$work/lab.sqlite")

# The same frame ids on one Modbus TCP bus where nothing listens: every frame is offline, the data is
# all in the database, and acquisition costs next to nothing.
{
  printf '[store]\npath = "%s/lab.sqlite"\n[http]\nlisten = "127.0.0.1:0"\n[log]\nlevel = "warn"\n' "$work"
  printf '[[bus]]\nid = "bench"\nkind = "modbus-tcp"\naddress = "127.0.0.1:1"\ntimeout_ms = 1000\n'
  for u in $(seq 1 $frames); do
    printf '[[frame]]\nid = "F%s"\nbus = "bench"\nunit = %s\nring_diameter_mm = 63.5\n' "$u" "$u"
    printf '[frame.displacement]\nregister = { table = "input", address = 0, type = "i32" }\ncalibration = { gain = 0.0001 }\n'
    printf '[frame.load]\nregister = { table = "input", address = 2, type = "i32" }\ncalibration = { gain = 0.0001 }\n'
    printf '[frame.temperature]\nregister = { table = "input", address = 4, type = "i16" }\ncalibration = { gain = 0.01 }\n'
  done
} > "$work/oedolog.toml"

target/release/oedolog run --config "$work/oedolog.toml" > "$work/daemon.out" 2> "$work/daemon.err" < /dev/null &
daemon=$!
# Wait on the readiness line (the start runs an integrity check over the whole file and resumes 32 watches).
for _ in $(seq 1200); do
  grep -q "listening on http://" "$work/daemon.out" 2> /dev/null && break
  kill -0 "$daemon" 2> /dev/null || { echo "oedolog run exited:" >&2; cat "$work/daemon.err" >&2; exit 1; }
  sleep 0.1
done
http=$(sed -n 's#^listening on http://\(.*\)/$#\1#p' "$work/daemon.out")
[ -n "$http" ] || { echo "no readiness line from oedolog run" >&2; cat "$work/daemon.err" >&2; exit 1; }
echo "== oedolog run listening on $http ($readings readings, $frames frames)"

# name|path|target p99 ms
routes=(
  "overview|/api/frames|10"
  "readings F7 #6 (running)|/api/frames/F7/increments/6/readings?max_points=500|30"
  "readings F7 #3 (finished)|/api/frames/F7/increments/3/readings?max_points=500|30"
)
# Each route answers 200 with what it should before it is loaded.
for r in "${routes[@]}"; do
  IFS='|' read -r name path _ <<< "$r"
  code=$(curl -s -o "$work/body.json" -w '%{http_code}' "http://$http$path")
  [ "$code" = 200 ] || { echo "$path answered $code: $(head -c 300 "$work/body.json")" >&2; exit 1; }
  python3 - "$work/body.json" "$name" << 'EOF'
import json, sys
body = json.load(open(sys.argv[1]))
if isinstance(body, list):
    print(f"   {sys.argv[2]}: {len(body)} frames, {len(open(sys.argv[1], 'rb').read())} bytes")
else:
    print(f"   {sys.argv[2]}: {body['reading_count']} polls binned to {len(body['points'])} points")
EOF
done

# wrk's latency line, e.g. "     99%   12.34ms", in ms.
to_ms() { python3 -c "
import re, sys
m = re.fullmatch(r'([0-9.]+)(us|ms|s|m)', sys.argv[1])
print('%.2f' % (float(m[1]) * {'us': 1e-3, 'ms': 1.0, 's': 1e3, 'm': 6e4}[m[2]]))" "$1"; }

summary=()
fail=0
for r in "${routes[@]}"; do
  IFS='|' read -r name path target <<< "$r"
  # One client, one request at a time: the route's own service time, without queueing behind 49 others.
  serial=$(for _ in $(seq 30); do curl -s -o /dev/null -w '%{time_total}\n' "http://$http$path"; done |
    sort -n | awk '{t[NR] = $1 * 1000} END {printf "%.2f", t[int((NR + 1) / 2)]}')
  echo "== wrk -c $connections -t $threads -d ${seconds}s --timeout 10s --latency $path"
  wrk -c "$connections" -t "$threads" -d "${seconds}s" --timeout 10s --latency "http://$http$path" | tee "$work/wrk.out"
  p50=$(to_ms "$(awk '$1 == "50%" {print $2}' "$work/wrk.out")")
  p99=$(to_ms "$(awk '$1 == "99%" {print $2}' "$work/wrk.out")")
  rps=$(awk '/^Requests\/sec:/ {print $2}' "$work/wrk.out")
  bad=$(awk '/Non-2xx or 3xx responses:/ {print $5}' "$work/wrk.out")
  errors=$(awk '/Socket errors:/ {$1 = $1; print}' "$work/wrk.out")
  verdict=$(python3 -c "import sys; print('meets' if float(sys.argv[1]) <= float(sys.argv[2]) else 'MISSES')" "$p99" "$target")
  [ "$verdict" = meets ] || fail=1
  [ -z "${bad:-}" ] || { verdict="$verdict, ${bad} non-2xx"; fail=1; }
  [ -z "${errors:-}" ] || verdict="$verdict, $errors"
  summary+=("$(printf '%-28s %10s %9s %9s %10s %8s  %s' "$name" "$serial" "$p50" "$p99" "$rps" "$target" "$verdict")")
done

# Page weight: the overview page, the frame page and every script and stylesheet they load.
assets=()
for page in / /frame.html; do
  curl -sf "http://$http$page" -o "$work/page.html"
  assets+=("$page")
  while read -r ref; do assets+=("/$ref"); done < <(grep -oE '<(script|link)[^>]*(src|href)="[^"]+"' "$work/page.html" |
    sed -E 's/.*(src|href)="([^"]+)"/\2/' | grep -vE '^(https?:)?//')
done
mapfile -t assets < <(printf '%s\n' "${assets[@]}" | awk '!seen[$0]++')
weight=0
wire=0
echo "== page weight"
for a in "${assets[@]}"; do
  bytes=$(curl -sf -o /dev/null -w '%{size_download}' "http://$http$a")
  gz=$(curl -sf --compressed -o /dev/null -w '%{size_download}' "http://$http$a")
  printf '   %-32s %8s bytes (%s on the wire with Accept-Encoding: gzip)\n' "$a" "$bytes" "$gz"
  weight=$((weight + bytes))
  wire=$((wire + gz))
done

echo
echo "== summary: $frames frames, $readings stored readings, wrk -c $connections -t $threads, ${seconds}s per route, $(nproc) CPUs"
printf '%-28s %10s %9s %9s %10s %8s  %s\n' route "1-client ms" "p50 ms" "p99 ms" "req/s" "target" verdict
printf '%s\n' "${summary[@]}"
page_verdict=$([ "$weight" -le 300000 ] && echo meets || echo MISSES)
[ "$page_verdict" = meets ] || fail=1
printf 'dashboard page weight: %d bytes (%.1f KB) uncompressed, %d bytes on the wire; target 300 KB: %s\n' \
  "$weight" "$(python3 -c "print($weight / 1000)")" "$wire" "$page_verdict"
exit $fail
