#!/usr/bin/env python3
"""Two independent Modbus RTU environment sensors on one serial line, for
cleanmon's serial wire tests.

Serves, with pymodbus (Debian python3-pymodbus, written for its 3.0 API),
on the serial device given by --port (one end of a socat pseudo-terminal
pair in the tests), at --baud, --parity (N, E or O) and --stop bits:

  unit 7, a temperature and humidity sensor, input registers from 0:
    0   temperature, signed, 0.01 degC:  2137 (21.37 degC)
    1   relative humidity, 0.01 %:       4480 (44.80 %)
    2   status: 0 ok
  unit 8, an airflow velocity sensor, holding registers from 0:
    0   velocity, 0.001 m/s:              452 (0.452 m/s)
    1   temperature, signed, 0.01 degC:  -150 (-1.50 degC; unused by cleanmon)

Registers beyond these are answered with exception 2 (illegal data
address). Prints "serving PORT" on stdout once the port is open.
"""

import argparse
import asyncio
import sys

from pymodbus.datastore import (
    ModbusSequentialDataBlock,
    ModbusServerContext,
    ModbusSlaveContext,
)
from pymodbus.server import StartAsyncSerialServer
from pymodbus.transaction import ModbusRtuFramer


def block(values):
    return ModbusSequentialDataBlock(0, values)


def sensor(ir, hr):
    return ModbusSlaveContext(
        ir=block(ir), hr=block(hr), di=block([0]), co=block([0]), zero_mode=True
    )


async def main():
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--port", required=True)
    ap.add_argument("--baud", type=int, default=19200)
    ap.add_argument("--parity", choices=["N", "E", "O"], default="E")
    ap.add_argument("--stop", type=int, choices=[1, 2], default=1)
    a = ap.parse_args()
    context = ModbusServerContext(
        slaves={
            7: sensor([2137, 4480, 0], [0]),
            8: sensor([0], [452, (-150) & 0xFFFF]),
        },
        single=False,
    )
    server = await StartAsyncSerialServer(
        context=context,
        framer=ModbusRtuFramer,
        port=a.port,
        baudrate=a.baud,
        parity=a.parity,
        stopbits=a.stop,
        bytesize=8,
        defer_start=True,
    )
    await server.start()
    if server.transport is None:
        sys.exit(f"cannot open {a.port}")
    print(f"serving {a.port}", flush=True)
    await server.serve_forever()


if __name__ == "__main__":
    try:
        asyncio.run(main())
    except KeyboardInterrupt:
        sys.exit(0)
