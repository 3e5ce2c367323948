#!/usr/bin/env python3
"""A pymodbus 3.16.1 Modbus server used as an independent peer for oedolog-protocol's master side.

Serves the devices described by --layout (JSON: {"<unit id>": {"holding": [...], "input": [...],
"readonly_holding_at": N}}) over TCP or RTU. Holding and input registers are separate blocks that start
at address 0; one extra holding register at readonly_holding_at is read-only. Everything else is invalid.

Prints one readiness line on stdout, flushed, once the endpoint is open:
    listening on tcp HOST:PORT      (the bound port, also when --tcp asked for port 0)
    listening on rtu PATH
It must not invent register values: every value it serves comes from --layout.
"""

import argparse
import asyncio
import json
import sys

from pymodbus.server import ModbusSerialServer, ModbusTcpServer
from pymodbus.simulator import DataType, SimData, SimDevice


def build_device(unit_id: int, spec: dict) -> SimDevice:
    holding = [SimData(address=0, values=list(spec["holding"]), datatype=DataType.REGISTERS)]
    if "readonly_holding_at" in spec:
        holding.append(
            SimData(
                address=int(spec["readonly_holding_at"]),
                values=[0x0BAD],
                datatype=DataType.REGISTERS,
                readonly=True,
            )
        )
    inputs = [SimData(address=0, values=list(spec["input"]), datatype=DataType.REGISTERS)]
    # Non-shared mode needs all four blocks; coils and discrete inputs are unused but must be present.
    coils = [SimData(address=0, values=[False] * 16, datatype=DataType.BITS)]
    discrete = [SimData(address=0, values=[False] * 16, datatype=DataType.BITS)]
    return SimDevice(id=unit_id, simdata=(coils, discrete, holding, inputs))


async def serve(args: argparse.Namespace) -> None:
    layout = json.loads(args.layout)
    devices = [build_device(int(unit), spec) for unit, spec in layout.items()]
    if args.tcp:
        host, _, port = args.tcp.rpartition(":")
        server = ModbusTcpServer(devices, address=(host, int(port)))
        await server.serve_forever(background=True)
        # pymodbus keeps the asyncio.Server as its transport; its socket knows the port the OS picked.
        bound_port = server.transport.sockets[0].getsockname()[1]
        print(f"listening on tcp {host}:{bound_port}", flush=True)
    else:
        server = ModbusSerialServer(
            devices, port=args.rtu, baudrate=args.baud, parity=args.parity, timeout=1
        )
        await server.serve_forever(background=True)
        print(f"listening on rtu {args.rtu}", flush=True)
    await server.serving


def main() -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    endpoint = parser.add_mutually_exclusive_group(required=True)
    endpoint.add_argument("--tcp", help="HOST:PORT to listen on; port 0 picks a free one")
    endpoint.add_argument("--rtu", help="serial device path (a pty from socat in tests)")
    parser.add_argument("--baud", type=int, default=19200)
    # pyserial cannot open a pty with even parity (DEVELOPERS.md, Testing), so tests use N.
    parser.add_argument("--parity", choices=["N", "E", "O"], default="N")
    parser.add_argument("--layout", required=True, help="JSON register layout per unit id")
    args = parser.parse_args()
    try:
        asyncio.run(serve(args))
    except KeyboardInterrupt:
        pass
    return 0


if __name__ == "__main__":
    sys.exit(main())
