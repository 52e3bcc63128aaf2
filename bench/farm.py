"""A farm of lf-mbtcp stations in one process: many pymodbus TCP servers, one per port.

``python -m bench.farm --stations N --period S`` starts N servers on free loopback ports,
prints one JSON line ``{"ports": [...]}`` once all listen, then publishes one new result per
station every ``--period`` seconds (stations staggered), written as a careful station writes:
the slot first, then the counter (sim/README.md, "Consistent read"). ``ended_at`` is the real
time of the write, so a reader's detection latency is ``received_at - ended_at``. On SIGTERM it
prints ``{"published": [...], "writes_refused": n}`` (newest cycle per station; peer writes
are refused and counted) and exits. SIGUSR1 stops publishing (prints ``{"published": ...}``)
but keeps serving, so a reader can catch up before the measurement ends. Much lighter than
the simulator (no physics), so the bench measures the gateway, not the plant.
"""

from __future__ import annotations

import argparse
import asyncio
import contextlib
import json
import logging
import math
import signal
import sys
import time

from pymodbus.constants import ExcCodes
from pymodbus.server import ModbusTcpServer
from pymodbus.simulator import DataType, SimData, SimDevice

from sim.formats import MBTCP, encode_f32, encode_string, encode_u32

logging.getLogger("pymodbus").setLevel(logging.CRITICAL)


def result_slot(cycle: int, ended_unix: int) -> list[int]:
    """A 30-register lf-mbtcp result block (layout: sim/README.md, type lf-mbtcp)."""
    regs = [
        *encode_u32(cycle), *encode_u32(ended_unix), 1, 1,
        *encode_f32(350.0), *encode_f32(40.0 + cycle % 10), *encode_f32(0.1 + (cycle % 7) / 100),
        *encode_f32(2.0), *encode_f32(math.nan), 30, 80, 100, 2241,
        *encode_string(f"P{cycle % 10_000_000:07d}", 8), *encode_u32(cycle),
    ]  # fmt: skip
    assert len(regs) == MBTCP.slot_length, len(regs)
    return regs


class FarmStation:
    def __init__(self, index: int) -> None:
        self.index = index
        self.cycle = 0
        self.server: ModbusTcpServer | None = None
        self.port = 0
        self.refused = 0
        self._own = False

    async def _action(self, function_code: int, start_address: int, address: int, count: int,
                      registers: list[int], set_values: list[int] | list[bool] | None,
                      ) -> ExcCodes | None:  # fmt: skip
        if set_values is not None and not self._own:
            self.refused += 1
            return ExcCodes.ILLEGAL_FUNCTION
        return None

    async def start(self) -> None:
        size = MBTCP.size
        block = [SimData(0, count=size, values=0, datatype=DataType.REGISTERS)]
        bits = [SimData(0, count=1, values=False, datatype=DataType.BITS)]
        none = [SimData(0, count=1, datatype=DataType.INVALID)]
        device = SimDevice(id=1, simdata=(bits, bits, block, none), action=self._action)
        server = ModbusTcpServer(device, address=("127.0.0.1", 0))
        await server.serve_forever(background=True)
        sockets = getattr(server.transport, "sockets", None)
        assert sockets, "no listening socket"
        self.port = int(sockets[0].getsockname()[1])
        self.server = server
        await self._write(5, [MBTCP.ring_depth])

    async def _write(self, address: int, values: list[int]) -> None:
        assert self.server is not None
        self._own = True
        try:
            await self.server.async_setValues(1, 3, address, values)
        finally:
            self._own = False

    async def publish(self) -> None:
        self.cycle += 1
        await self._write(MBTCP.slot_address(self.cycle), result_slot(self.cycle, int(time.time())))
        await self._write(1, encode_u32(self.cycle))

    async def close(self) -> None:
        if self.server is not None:
            await self.server.shutdown()


async def serve(n: int, period: float, initial: int) -> None:
    stations = [FarmStation(i) for i in range(n)]
    for st in stations:
        await st.start()
        for _ in range(initial):
            await st.publish()
    print(json.dumps({"ports": [s.port for s in stations]}), flush=True)
    stop = asyncio.Event()
    freeze = asyncio.Event()  # no more results; keep serving until stop
    loop = asyncio.get_running_loop()

    def on_term() -> None:
        freeze.set()
        stop.set()

    for sig in (signal.SIGTERM, signal.SIGINT):
        loop.add_signal_handler(sig, on_term)
    loop.add_signal_handler(signal.SIGUSR1, freeze.set)
    if period > 0:
        # one tick per station slot: station i publishes at t0 + i * period / n + k * period
        step = period / n
        t0 = loop.time()
        k = 0
        while not freeze.is_set():
            k += 1
            with contextlib.suppress(TimeoutError):
                await asyncio.wait_for(freeze.wait(), max(0.0, t0 + k * step - loop.time()))
            if not freeze.is_set():
                await stations[(k - 1) % n].publish()
    await freeze.wait()
    published = [s.cycle for s in stations]
    print(json.dumps({"published": published}), flush=True)
    await stop.wait()
    refused = sum(s.refused for s in stations)
    for st in stations:
        await st.close()
    print(json.dumps({"published": published, "writes_refused": refused}), flush=True)


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__)
    ap.add_argument("--stations", type=int, default=10)
    ap.add_argument("--period", type=float, default=2.0,
                    help="seconds between results of one station (0: publish none)")
    ap.add_argument("--initial", type=int, default=1, help="results in each ring at start")
    args = ap.parse_args(argv)
    asyncio.run(serve(args.stations, args.period, args.initial))
    return 0


if __name__ == "__main__":
    sys.exit(main())
