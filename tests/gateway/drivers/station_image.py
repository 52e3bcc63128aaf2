"""A scripted lf-mbtcp station image for the ring-read tests (registers per sim/README.md).

Register blocks are encoded with pymodbus's own ``convert_to_registers`` (big-endian words),
independently of the profile code that decodes them.
"""

from __future__ import annotations

import math
from typing import Any

from pymodbus.client import AsyncModbusTcpClient

from gateway.drivers.base import ExceptionReply
from gateway.profiles import StationContext, load_profile

DEPTH = 8
BASE = 100
STRIDE = 32
SLOT = 30
CAL_AT = 400
CAL_LEN = 16
T0 = 1_796_000_000  # 2026-11-29, UNIX seconds

_DT = AsyncModbusTcpClient.DATATYPE


def _enc(value: float | int | str, dt: Any) -> list[int]:
    return AsyncModbusTcpClient.convert_to_registers(value, dt, word_order="big")


def u32(value: int) -> list[int]:
    return _enc(value, _DT.UINT32)


def spec() -> Any:
    """The built-in lf-mbtcp profile's register map."""
    modbus = load_profile("lf-mbtcp").modbus
    assert modbus is not None
    return modbus


def ctx() -> StationContext:
    return StationContext(station="T1", line="L1", timezone="UTC", programs={1: "HX-210"})


def slot(cycle: int, *, verdict: int = 1) -> list[int]:
    regs = [
        *u32(cycle), *u32(T0 + cycle * 30), 1, verdict,
        *_enc(350.0, _DT.FLOAT32), *_enc(40.0 + cycle % 10, _DT.FLOAT32),
        *_enc(0.1, _DT.FLOAT32), *_enc(2.0, _DT.FLOAT32), *_enc(math.nan, _DT.FLOAT32),
        30, 80, 100, 2241, *_enc(f"HX210-{cycle:06d}  "[:16].ljust(16), _DT.STRING),
        *u32(cycle),
    ]  # fmt: skip
    assert len(regs) == SLOT
    return regs


def cal_block(counter: int) -> list[int]:
    regs = [
        *u32(counter), *u32(T0 + counter * 3600), 1, 1, *_enc(38.6, _DT.FLOAT32),
        *_enc(237.9, _DT.FLOAT32), *_enc(3.0, _DT.FLOAT32), *_enc(350.0, _DT.FLOAT32),
        *u32(counter),
    ]  # fmt: skip
    assert len(regs) == CAL_LEN
    return regs


class StationImage:
    """A station's register image, written as a station would: slot first, then counter.

    ``on_read`` hooks let a test change the image between two reads of one poll (a new result
    arriving mid-poll, a torn write in progress). Every read is logged; writes are recorded.
    """

    def __init__(self) -> None:
        self.regs = [0] * 600
        self.reads: list[tuple[int, int, int]] = []
        self.writes: list[tuple[int, list[int]]] = []
        self.hooks: list[Any] = []
        self.fail_next: list[Exception] = []
        self.counter = 0
        self.cal_counter = 0

    def publish(self, cycle: int, *, torn: bool = False) -> None:
        if torn:  # counter first, then only the first half of the slot (second half is old)
            self.regs[1:3] = u32(cycle)
            start = BASE + STRIDE * (cycle % DEPTH)
            self.regs[start : start + SLOT // 2] = slot(cycle)[: SLOT // 2]
        else:
            start = BASE + STRIDE * (cycle % DEPTH)
            self.regs[start : start + SLOT] = slot(cycle)
            self.regs[1:3] = u32(cycle)
        self.counter = cycle

    def finish_torn(self, cycle: int) -> None:
        start = BASE + STRIDE * (cycle % DEPTH)
        self.regs[start : start + SLOT] = slot(cycle)

    def calibrate(self, counter: int) -> None:
        self.regs[CAL_AT : CAL_AT + CAL_LEN] = cal_block(counter)
        self.regs[3:5] = u32(counter)
        self.cal_counter = counter

    async def read(self, function: int, address: int, count: int, device_id: int) -> list[int]:
        self.reads.append((function, address, count))
        if self.fail_next:
            raise self.fail_next.pop(0)
        values = self.regs[address : address + count]
        for hook in list(self.hooks):
            if hook(self, address, count):
                self.hooks.remove(hook)
        return values

    async def write(self, address: int, values: list[int], device_id: int) -> None:
        self.writes.append((address, values))

    connected = True

    async def connect(self) -> None:
        self.connected = True

    def close(self) -> None:
        self.connected = False


def busy() -> ExceptionReply:
    return ExceptionReply(6, "stand-in")
