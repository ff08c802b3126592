#!/usr/bin/env python3
"""An independent Modbus TCP particle counter for cleanmon's wire tests.

Serves, with pymodbus (Debian package python3-pymodbus, written for its
3.0 API), the register block of testdata/modbus-counter.yaml on
127.0.0.1, and finishes one sample a second:

  input registers (function 4), addresses counted from 0:
    0-1    sample number, 32 bit
    2-3    count >= 0.3 um, 32 bit: 100000 + 13 n
    4-5    count >= 0.5 um, 32 bit:  70000 +  5 n
    6-7    count >= 5 um,   32 bit:  n mod 50
    8      status: 0 ok, 1 warning (every tenth sample), 2 fault
    9-10   volume, 32 bit, 0.0001 L: 4717 (0.4717 L)
  holding registers (function 3):
    0      flow, 0.01 L/min: 2830 (28.3 L/min)
    1      sampling time, s: 1

n is the sample number. 32-bit values are written in the word order given
by --word-order. Registers beyond these 11 input and 2 holding ones do not
exist: reading them is answered with exception 2 (illegal data address).

The sample number is the number of whole seconds since --epoch (Unix
seconds, default: the start), so a restarted server carries on where the
last one stopped. Once listening it prints "listening 127.0.0.1:PORT" on
stdout; --port 0 picks a free port.
"""

import argparse
import asyncio
import sys
import time

from pymodbus.datastore import (
    ModbusSequentialDataBlock,
    ModbusServerContext,
    ModbusSlaveContext,
)
from pymodbus.server import StartAsyncTcpServer

INPUT_REGS = 11
HOLDING_REGS = 2


def words(value, low_first):
    hi, lo = (value >> 16) & 0xFFFF, value & 0xFFFF
    return [lo, hi] if low_first else [hi, lo]


def sample_registers(n, low_first):
    status = 1 if n % 10 == 0 else 0
    return (
        words(n, low_first)
        + words(100000 + 13 * n, low_first)
        + words(70000 + 5 * n, low_first)
        + words(n % 50, low_first)
        + [status]
        + words(4717, low_first)
    )


async def advance(slave, epoch, low_first):
    last = None
    while True:
        n = int(time.time() - epoch)
        if n != last:
            # One call, so that no request sees half a sample (the server
            # answers between awaits only).
            slave.setValues(4, 0, sample_registers(n, low_first))
            last = n
        await asyncio.sleep(0.05)


async def main():
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--port", type=int, required=True)
    ap.add_argument("--word-order", choices=["high-first", "low-first"], default="high-first")
    ap.add_argument("--epoch", type=float, default=None)
    ap.add_argument("--unit", type=int, default=1)
    a = ap.parse_args()
    low_first = a.word_order == "low-first"
    epoch = time.time() if a.epoch is None else a.epoch

    slave = ModbusSlaveContext(
        ir=ModbusSequentialDataBlock(0, sample_registers(int(time.time() - epoch), low_first)),
        hr=ModbusSequentialDataBlock(0, [2830, 1]),
        di=ModbusSequentialDataBlock(0, [0]),
        co=ModbusSequentialDataBlock(0, [0]),
        zero_mode=True,
    )
    context = ModbusServerContext(slaves={a.unit: slave}, single=False)
    server = await StartAsyncTcpServer(
        context=context,
        address=("127.0.0.1", a.port),
        defer_start=True,
        allow_reuse_address=True,
    )
    serving = asyncio.create_task(server.serve_forever())
    await server.serving
    host, port = server.server.sockets[0].getsockname()[:2]
    print(f"listening {host}:{port}", flush=True)
    await asyncio.gather(serving, advance(slave, epoch, low_first))


if __name__ == "__main__":
    try:
        asyncio.run(main())
    except KeyboardInterrupt:
        sys.exit(0)
