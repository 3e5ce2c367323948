"""Serial-line baseline: the pymodbus 3.16.1 serial (RTU) client reading the simulator as fast as it can.

Reads input registers 0-4 (displacement, load, temperature: the daemon's block) of units 1..N in turn,
one request at a time, for SECONDS; prints one JSON line
{"requests": n, "ok": n, "errors": n, "seconds": s, "rate": ok/s}.
"""

import argparse
import json
import time

from pymodbus.client import ModbusSerialClient


def main() -> None:
    parser = argparse.ArgumentParser()
    parser.add_argument("--port", required=True, help="serial device or pty path")
    parser.add_argument("--baud", type=int, default=19200)
    parser.add_argument("--parity", choices=["N", "E", "O"], default="E")
    parser.add_argument("--stop-bits", type=int, choices=[1, 2], default=1)
    parser.add_argument("--units", type=int, default=8)
    parser.add_argument("--seconds", type=float, default=5.0)
    args = parser.parse_args()
    client = ModbusSerialClient(
        args.port,
        baudrate=args.baud,
        bytesize=8,
        parity=args.parity,
        stopbits=args.stop_bits,
        timeout=1,
        retries=0,
    )
    if not client.connect():
        raise SystemExit(f"cannot open {args.port}")
    requests = ok = errors = 0
    start = time.perf_counter()
    deadline = start + args.seconds
    unit = 1
    while time.perf_counter() < deadline:
        requests += 1
        try:
            reply = client.read_input_registers(0, count=5, device_id=unit)
            if reply.isError():
                errors += 1
            else:
                ok += 1
        except Exception:  # noqa: BLE001 - a timeout counts as a failed transaction, as for the daemon
            errors += 1
        unit = unit % args.units + 1
    elapsed = time.perf_counter() - start
    client.close()
    print(json.dumps({"requests": requests, "ok": ok, "errors": errors, "seconds": elapsed, "rate": ok / elapsed}))


if __name__ == "__main__":
    main()
