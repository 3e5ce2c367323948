#!/usr/bin/env python3
"""A pymodbus 3.16.1 client used as an independent peer that reads and writes the oedolog simulator.

For each unit in --plan it reads input registers 0-7, holding registers 0-8 and the read-only mirror
100-107, writes holding 0 (averaging count) with FC06 and holding 1-8 (frame tag) with FC16, reads them
back, and provokes the exceptions the register map promises; when every unit is done it reads each
unit's holding 0-8 once more. It prints one JSON object on stdout.
It only reports what the device answered; it must not judge the answers (the Rust test does that).
"""

import argparse
import json
import sys

from pymodbus.client import ModbusSerialClient, ModbusTcpClient
from pymodbus.exceptions import ModbusException


def outcome(response) -> dict:
    """What a request got back: its registers, its write echo, or an exception code."""
    if response.isError():
        return {"exception": int(response.exception_code)}
    result = {"function": int(response.function_code)}
    if getattr(response, "registers", None) is not None:
        result["registers"] = list(response.registers)
    if hasattr(response, "address"):
        result["address"] = int(response.address)
    if hasattr(response, "count"):
        result["count"] = int(response.count)
    return result


def tag_words(tag: str) -> list[int]:
    """16 ASCII bytes, two per register, first byte in the high half (Modbus big-endian convention)."""
    raw = tag.encode("ascii").ljust(16, b" ")[:16]
    return [(raw[i] << 8) | raw[i + 1] for i in range(0, 16, 2)]


def exercise_unit(client, unit: int, averaging: int, tag: str) -> dict:
    report = {
        "input": outcome(client.read_input_registers(0, count=8, device_id=unit)),
        "holding": outcome(client.read_holding_registers(0, count=9, device_id=unit)),
        "mirror": outcome(client.read_holding_registers(100, count=8, device_id=unit)),
        "write_single": outcome(client.write_register(0, averaging, device_id=unit)),
        "write_multiple": outcome(
            client.write_registers(1, tag_words(tag), device_id=unit)
        ),
        "holding_after": outcome(client.read_holding_registers(0, count=9, device_id=unit)),
        "exceptions": {
            "read_holding_unmapped": outcome(
                client.read_holding_registers(50, count=1, device_id=unit)
            ),
            "read_holding_past_tag": outcome(
                client.read_holding_registers(8, count=2, device_id=unit)
            ),
            "read_input_unmapped": outcome(
                client.read_input_registers(8, count=1, device_id=unit)
            ),
            "write_mirror": outcome(client.write_register(100, 1, device_id=unit)),
            "write_averaging_zero": outcome(client.write_register(0, 0, device_id=unit)),
            "write_averaging_65": outcome(client.write_register(0, 65, device_id=unit)),
        },
    }
    report["holding_final"] = outcome(client.read_holding_registers(0, count=1, device_id=unit))
    return report


def probe_silence(client, unit: int) -> dict:
    """Asks a unit the device should not answer; reports whether any reply came."""
    try:
        response = client.read_holding_registers(0, count=1, device_id=unit)
    except ModbusException as exc:
        return {"no_reply": True, "error": str(exc)}
    return outcome(response)


def main() -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    endpoint = parser.add_mutually_exclusive_group(required=True)
    endpoint.add_argument("--tcp", help="HOST:PORT of the simulator")
    endpoint.add_argument("--rtu", help="serial device path (a pty from socat in tests)")
    parser.add_argument("--baud", type=int, default=19200)
    # pyserial cannot open a pty with even parity (DEVELOPERS.md, Testing), so tests use N.
    parser.add_argument("--parity", choices=["N", "E", "O"], default="N")
    parser.add_argument(
        "--plan",
        required=True,
        help='JSON {"<unit>": {"averaging": N, "tag": "ASCII"}}: what to write to each unit',
    )
    parser.add_argument(
        "--silent-unit",
        type=int,
        help="a unit id with no device on the line: asked last, expecting no reply",
    )
    args = parser.parse_args()

    if args.tcp:
        host, _, port = args.tcp.rpartition(":")
        client = ModbusTcpClient(host, port=int(port), timeout=2, retries=0)
    else:
        client = ModbusSerialClient(
            args.rtu, baudrate=args.baud, parity=args.parity, timeout=2, retries=0
        )
    if not client.connect():
        print(f"read_sim.py: could not connect to {args.tcp or args.rtu}", file=sys.stderr)
        return 2
    try:
        plan = {int(unit): spec for unit, spec in json.loads(args.plan).items()}
        units = {
            str(unit): exercise_unit(client, unit, spec["averaging"], spec["tag"])
            for unit, spec in plan.items()
        }
        for unit, spec in plan.items():
            units[str(unit)]["tag_words"] = tag_words(spec["tag"])
            # Read after all units were written: a write must not have reached another unit.
            units[str(unit)]["holding_end"] = outcome(
                client.read_holding_registers(0, count=9, device_id=unit)
            )
        report = {"peer": "pymodbus", "units": units}
        if args.silent_unit is not None:
            report["silent_unit"] = probe_silence(client, args.silent_unit)
    finally:
        client.close()
    print(json.dumps(report), flush=True)
    return 0


if __name__ == "__main__":
    sys.exit(main())
