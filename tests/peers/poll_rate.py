"""Poll-rate baseline: the pymodbus 3.16.1 client reading the simulator over Modbus TCP as fast as it can.

Reads input registers 0-4 (displacement, load, temperature: the daemon's block) of units 1..N in turn,
one request at a time, for SECONDS; prints one JSON line {"requests": n, "seconds": s, "rate": r}.
"""

import argparse
import json
import time

from pymodbus.client import ModbusTcpClient


def main() -> None:
    parser = argparse.ArgumentParser()
    parser.add_argument("--tcp", required=True, help="HOST:PORT of the simulator")
    parser.add_argument("--units", type=int, default=8)
    parser.add_argument("--seconds", type=float, default=10.0)
    args = parser.parse_args()
    host, port = args.tcp.rsplit(":", 1)
    client = ModbusTcpClient(host, port=int(port), timeout=1, retries=0)
    if not client.connect():
        raise SystemExit(f"cannot connect to {args.tcp}")
    requests = 0
    errors = 0
    start = time.perf_counter()
    deadline = start + args.seconds
    unit = 1
    while time.perf_counter() < deadline:
        reply = client.read_input_registers(0, count=5, device_id=unit)
        if reply.isError():
            errors += 1
        requests += 1
        unit = unit % args.units + 1
    elapsed = time.perf_counter() - start
    client.close()
    print(json.dumps({"requests": requests, "errors": errors, "seconds": elapsed, "rate": requests / elapsed}))


if __name__ == "__main__":
    main()
