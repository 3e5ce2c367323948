#!/usr/bin/env bash
# Poll rate over Modbus TCP against the simulator: the daemon vs the pymodbus 3.16.1 client, same
# simulator, same run. Not part of tests/run.sh (benchmarks are not timed tests).
#   tests/bench/poll-rate.sh [SECONDS]        (needs target/peers-venv from tests/run.sh)
set -euo pipefail
cd "$(dirname "${BASH_SOURCE[0]}")/../.."
seconds=${1:-10}
frames=200
cargo build --release --workspace --bins -q
work=$(mktemp -d)
trap 'kill $(jobs -p) 2>/dev/null || true; rm -rf "$work"' EXIT
target/release/oedolog-sim --frames $frames --schedule manual --tcp 127.0.0.1:0 > "$work/sim.out" 2> /dev/null < /dev/null &
for _ in $(seq 100); do grep -q "listening on tcp" "$work/sim.out" 2>/dev/null && break; sleep 0.1; done
addr=$(sed -n 's/^listening on tcp //p' "$work/sim.out")
{
  printf '[store]\npath = "%s/lab.sqlite"\n[http]\nlisten = "127.0.0.1:0"\n[log]\nlevel = "warn"\n' "$work"
  printf '[[bus]]\nid = "sim"\nkind = "modbus-tcp"\naddress = "%s"\ntimeout_ms = 1000\n' "$addr"
  for u in $(seq 1 $frames); do
    printf '[[frame]]\nid = "F%s"\nbus = "sim"\nunit = %s\nring_diameter_mm = 63.5\npoll_ms = 10\nfast_poll_ms = 10\n' "$u" "$u"
    printf '[frame.displacement]\nregister = { table = "input", address = 0, type = "i32" }\ncalibration = { gain = 0.0001 }\n'
    printf '[frame.load]\nregister = { table = "input", address = 2, type = "i32" }\ncalibration = { gain = 0.0001 }\n'
    printf '[frame.temperature]\nregister = { table = "input", address = 4, type = "i16" }\ncalibration = { gain = 0.01 }\n'
  done
} > "$work/oedolog.toml"
target/release/oedolog run --config "$work/oedolog.toml" > "$work/daemon.out" 2> /dev/null &
daemon=$!
for _ in $(seq 100); do grep -q "listening on http://" "$work/daemon.out" 2>/dev/null && break; sleep 0.1; done
http=$(sed -n 's#^listening on http://\(.*\)/$#\1#p' "$work/daemon.out")
requests() { curl -s "http://$http/api/frames" | python3 -c 'import json,sys; print(sum(f["counters"]["requests"] for f in json.load(sys.stdin)))'; }
sleep 2
r0=$(requests); t0=$(date +%s.%N)
sleep "$seconds"
r1=$(requests); t1=$(date +%s.%N)
kill $daemon; wait $daemon 2>/dev/null || true
daemon_rate=$(python3 -c "print(($r1-$r0)/($t1-$t0))")
peer=$(target/peers-venv/bin/python tests/peers/poll_rate.py --tcp "$addr" --units $frames --seconds "$seconds")
peer_rate=$(python3 -c "import json; print(json.loads('$peer')['rate'])")
printf 'daemon (oedolog run, %s frames on one TCP bus): %.0f requests/s\n' $frames "$daemon_rate"
printf 'pymodbus 3.16.1 client, same simulator       : %.0f requests/s  %s\n' "$peer_rate" "$peer"
python3 -c "print(f'ratio daemon/pymodbus: {$daemon_rate/$peer_rate:.2f}')"
