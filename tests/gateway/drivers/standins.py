"""Unit-test stand-ins: a scripted Modbus station image and a minimal lf-mbtcp-like spec.

The spec decodes just enough (counter, state, guards, a few fields) for the consistent-read
logic to be tested register by register; real decoding is the profiles' and is tested there.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from datetime import UTC, datetime
from typing import Any

from gateway.drivers.base import ExceptionReply
from gateway.records import CalibrationEvent, Rejected, StationState, TestResult

DEPTH = 8
BASE = 100
STRIDE = 32
SLOT = 30
CAL_AT = 400
CAL_LEN = 16


def u32(value: int) -> list[int]:
    """Big-endian words (ABCD), as lf-mbtcp stores 32-bit values (sim/README.md)."""
    return [(value >> 16) & 0xFFFF, value & 0xFFFF]


def from_u32(regs: list[int]) -> int:
    return (regs[0] << 16) | regs[1]


@dataclass(frozen=True)
class _Field:
    at: int
    width: int
    type: str = "uint16"


@dataclass(frozen=True)
class _Ring:
    counter_address: int = 1
    counter_type: str = "uint32"
    base: int = BASE
    stride: int = STRIDE
    depth: int = DEPTH
    length: int = SLOT

    @property
    def counter_registers(self) -> int:
        return 2

    def slot_address(self, cycle: int) -> int:
        return self.base + self.stride * (cycle % self.depth)


@dataclass(frozen=True)
class _Block:
    counter_address: int = 3
    counter_type: str = "uint32"
    address: int = CAL_AT
    length: int = CAL_LEN

    @property
    def counter_registers(self) -> int:
        return 2


@dataclass(frozen=True)
class _Ack:
    address: int = 50
    type: str = "uint32"

    def encode(self, cycle: int, word_order: str = "big") -> list[int]:
        return u32(cycle)


@dataclass(frozen=True)
class SpecStandIn:
    framer: str = "tcp"
    device_id: int = 1
    function: int = 3
    poll_interval_s: float = 0.05
    timeout_s: float = 0.5
    word_order: str = "big"
    state: _Field | None = field(default_factory=lambda: _Field(0, 1))
    result: _Ring = field(default_factory=_Ring)
    calibration: _Block | None = field(default_factory=_Block)
    acknowledge: _Ack | None = None

    def decode_counter(self, regs: list[int]) -> int:
        return from_u32(regs)

    def decode_calibration_counter(self, regs: list[int]) -> int:
        return from_u32(regs)

    def decode_state(self, regs: list[int]) -> StationState | None:
        return {0: StationState.IDLE, 1: StationState.TESTING, 8: StationState.FAULT}.get(regs[0])

    def decode_result(
        self, regs: list[int], expected: int, ctx: Any, received_at: datetime
    ) -> TestResult | Rejected:
        head, tail = from_u32(regs[0:2]), from_u32(regs[28:30])
        raw = " ".join(f"{r:04x}" for r in regs)
        if head != expected or tail != expected:
            return Rejected(ctx.station, "stand-in@1", raw,
                            f"torn block: head {head}, tail {tail}, expected {expected}",
                            received_at)
        if regs[5] not in (1, 2, 3, 4):
            return Rejected(ctx.station, "stand-in@1", raw, f"verdict code {regs[5]} unknown",
                            received_at)
        return TestResult(
            station=ctx.station, line=ctx.line, cycle=expected,
            ended_at=datetime.fromtimestamp(from_u32(regs[2:4]), UTC), received_at=received_at,
            program="HX-210", verdict=("pass", "reject", "gross", "aborted")[regs[5] - 1],
            test_pressure_pa=350_000.0, pressure_loss_pa=float(regs[8]), leak_rate_sccm=0.1,
            reject_limit_sccm=2.0, fill_s=3.0, stabilise_s=8.0, test_s=10.0, raw=raw,
            profile="stand-in@1",
        )

    def decode_calibration(
        self, regs: list[int], expected: int, ctx: Any, received_at: datetime
    ) -> CalibrationEvent | Rejected:
        head, tail = from_u32(regs[0:2]), from_u32(regs[14:16])
        if head != expected or tail != expected:
            return Rejected(ctx.station, "stand-in@1", str(regs),
                            f"torn block: head {head} tail {tail}", received_at)
        return CalibrationEvent(
            station=ctx.station, line=ctx.line,
            ended_at=datetime.fromtimestamp(from_u32(regs[2:4]), UTC), received_at=received_at,
            program="HX-210", master_loss_pa=38.6, standard_loss_pa=237.9, standard_sccm=3.0,
            standard_ref_pressure_pa=350_000.0, ratio=6.163, sensitivity=0.01506, passed=True,
        )


@dataclass(frozen=True)
class Ctx:
    station: str = "T1"
    line: str = "L1"
    timezone: str = "UTC"
    programs: dict[int, str] = field(default_factory=dict)


def slot(cycle: int, *, tail: int | None = None, verdict: int = 1) -> list[int]:
    regs = [0] * SLOT
    regs[0:2] = u32(cycle)
    regs[2:4] = u32(1_796_000_000 + cycle * 30)
    regs[5] = verdict
    regs[8] = cycle % 1000
    regs[28:30] = u32(cycle if tail is None else tail)
    return regs


def cal_block(counter: int) -> list[int]:
    regs = [0] * CAL_LEN
    regs[0:2] = u32(counter)
    regs[2:4] = u32(1_796_000_000 + counter * 3600)
    regs[14:16] = u32(counter)
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
