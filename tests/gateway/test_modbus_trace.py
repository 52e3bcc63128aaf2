"""A Modbus station's curve block, read by counter: whole curves, losses on record, refusals.

The register images are built with the simulator's encoder (``sim.formats_traces``), and the
samples are checked against ``struct``'s IEEE-754 float32 (the standard library's codec), so
neither side checks itself."""

from __future__ import annotations

import struct
from datetime import UTC, datetime

import pytest

from gateway.drivers.modbus_trace import CurveReader
from gateway.profiles import StationContext, load_profile
from gateway.records import GapEvent, PressureTrace, Rejected, TestResult, Verdict
from sim.formats_traces import TRACE_BASE, mbtcp_trace, trace_size
from sim.traces import SimTrace

CTX = StationContext(station="L1-S2", line="L1", traces=True)
SPEC = load_profile("lf-mbtcp").modbus
T = datetime(2026, 12, 3, 8, tzinfo=UTC)


class Image:
    """Holding registers; ``on_read`` lets a test change them between two reads."""

    def __init__(self) -> None:
        self.regs = [0] * trace_size()
        self.reads = 0
        self.on_read: dict[int, list[tuple[int, list[int]]]] = {}

    async def read(self, function: int, address: int, count: int, device_id: int) -> list[int]:
        assert function == 3 and count <= 125
        self.reads += 1
        for at, values in self.on_read.pop(self.reads, []):
            self.regs[at:at + len(values)] = values
        return self.regs[address:address + count]

    def put(self, counter: int, cycle: int, samples: tuple[float, ...], role: str = "result"
            ) -> list[int]:
        tr = SimTrace(0.1, samples, (("fill", 0.0), ("stabilise", 0.2), ("test", 0.3),
                                     ("dump", 0.5), ("end", (len(samples) - 1) * 0.1)))
        regs = mbtcp_trace(counter, role, cycle, tr)
        self.regs[TRACE_BASE:TRACE_BASE + len(regs)] = regs
        return regs


def result(cycle: int) -> TestResult:
    return TestResult(station="L1-S2", line="L1", cycle=cycle, ended_at=T, received_at=T,
                      program="HX-210", verdict=Verdict.PASS)


def f32(kpa: float) -> float:
    return struct.unpack(">f", struct.pack(">f", kpa))[0] * 1000.0


SAMPLES = (0.0, 200_000.0, 350_000.0, 349_990.0, 349_980.0, 349_970.0, 100.0)


async def test_a_new_curve_is_read_whole_and_tied_to_its_result() -> None:
    assert SPEC is not None
    image = Image()
    image.put(1, 41, SAMPLES)
    # first contact: the curve held is taken only when its result was read in the same poll
    # (otherwise it was journalled before a restart, or predates anything the gateway saw)
    assert await CurveReader(SPEC, CTX, 1).poll(image, []) == []
    reader = CurveReader(SPEC, CTX, 1)
    (curve,) = await reader.poll(image, [result(41)])
    assert isinstance(curve, PressureTrace) and curve.cycle == 41 and curve.ended_at == T
    assert curve.pressures_pa == pytest.approx([f32(p / 1000) for p in SAMPLES], abs=1e-6)
    image.put(2, 42, SAMPLES)
    (nxt,) = await reader.poll(image, [result(42)])
    assert isinstance(nxt, PressureTrace) and nxt.cycle == 42
    reads = image.reads
    assert await reader.poll(image, []) == []  # nothing new: one counter read
    assert image.reads == reads + 1
    assert nxt.program == "HX-210" and nxt.phases[2] == ("test", pytest.approx(0.3))


async def test_curves_overwritten_between_polls_are_a_gap_on_record() -> None:
    assert SPEC is not None
    image, reader = Image(), CurveReader(SPEC, CTX, 1)
    image.put(5, 10, SAMPLES)
    await reader.poll(image, [result(10)])
    image.put(9, 14, SAMPLES)  # curves 6, 7 and 8 came and went
    gap, curve = await reader.poll(image, [result(14)])
    assert isinstance(gap, GapEvent) and (gap.first, gap.last, gap.source) == (6, 8, "trace")
    assert "3 pressure curve(s) overwritten" in gap.detail
    assert isinstance(curve, PressureTrace) and curve.cycle == 14


async def test_a_curve_rewritten_while_read_is_read_again_next_poll() -> None:
    assert SPEC is not None
    image, reader = Image(), CurveReader(SPEC, CTX, 1)
    image.put(1, 1, SAMPLES)
    await reader.poll(image, [result(1)])
    image.put(2, 2, SAMPLES)
    reads = image.reads
    # the station writes curve 3 between our sample read and the counter's second read
    newer = Image()
    regs = newer.put(3, 3, tuple(p + 1 for p in SAMPLES))
    image.on_read[reads + 4] = [(TRACE_BASE, regs)]
    assert await reader.poll(image, [result(2)]) == []  # not taken: it changed under us
    gap, curve = await reader.poll(image, [result(3)])
    assert isinstance(gap, GapEvent) and (gap.first, gap.last) == (2, 2)
    assert isinstance(curve, PressureTrace) and curve.cycle == 3


async def test_a_sample_count_outside_the_profile_is_quarantined() -> None:
    assert SPEC is not None
    image, reader = Image(), CurveReader(SPEC, CTX, 1)
    image.put(1, 1, SAMPLES)
    await reader.poll(image, [result(1)])
    image.put(2, 2, SAMPLES)
    image.regs[TRACE_BASE + 5] = 4000  # more than samples.max = 1500
    (rej,) = await reader.poll(image, [result(2)])
    assert isinstance(rej, Rejected) and "trace sample count 4000 outside 2..1500" in rej.reason


async def test_a_curve_read_before_its_result_waits_for_it_to_take_its_time() -> None:
    """The station wrote result 8 and its curve between the gateway's ring read and curve
    read: the curve waits for the result (read at the next poll) instead of going untied."""
    assert SPEC is not None
    image, reader = Image(), CurveReader(SPEC, CTX, 1)
    image.put(1, 7, SAMPLES)
    await reader.poll(image, [result(7)])
    image.put(2, 8, SAMPLES)
    assert await reader.poll(image, []) == []  # result 8 not read yet: the curve waits
    (curve,) = await reader.poll(image, [result(8)])
    assert isinstance(curve, PressureTrace) and curve.time_source == "station"
    image.put(3, 9, SAMPLES)  # a result the gateway never reads: the curve goes untied
    waits = [await reader.poll(image, []) for _ in range(3)]
    assert waits == [[], [], []]
    (late,) = await reader.poll(image, [])
    assert isinstance(late, PressureTrace) and late.time_source == "gateway"
