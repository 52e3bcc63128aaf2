"""A ring that fits in one read beside its counter is read with it: one round trip a result.

The layout is lf-mbtcp's with the ring moved up to register 8 and three slots deep, so the
header (0-4) and every slot (8-101) fit in one read of at most 125 registers (Modbus
application protocol spec 6.3). The rules of the consistent read still hold: only a slot whose
head and tail guards equal the expected cycle is taken, a torn one is read again, a ring that
ran over is a reported gap. On a serial line the reader keeps the three small reads.
"""

from __future__ import annotations

import dataclasses
from typing import Any

import pytest

from gateway.drivers.modbus import RingReader
from gateway.records import GapEvent, TestResult
from tests.gateway.drivers.station_image import SLOT, STRIDE, ctx, slot, spec, u32

pytestmark = pytest.mark.timeout(10)

BASE, DEPTH = 8, 3
WHOLE = (3, 0, BASE + STRIDE * (DEPTH - 1) + SLOT)  # fc3, registers 0..101


def compact(framer: str = "tcp") -> Any:
    modbus = spec()
    return dataclasses.replace(
        modbus, framer=framer, result=dataclasses.replace(modbus.result, base=BASE, depth=DEPTH)
    )


class Image:
    """The compact station's registers: a slot is written before its counter, as stations do."""

    def __init__(self) -> None:
        self.regs = [0] * 200
        self.reads: list[tuple[int, int, int]] = []

    def publish(self, cycle: int, *, torn: bool = False) -> None:
        start = BASE + STRIDE * (cycle % DEPTH)
        block = slot(cycle)
        if torn:  # counter first, and only the slot's first half so far
            self.regs[1:3] = u32(cycle)
            self.regs[start : start + SLOT // 2] = block[: SLOT // 2]
            return
        self.regs[start : start + SLOT] = block
        self.regs[1:3] = u32(cycle)

    def finish(self, cycle: int) -> None:
        start = BASE + STRIDE * (cycle % DEPTH)
        self.regs[start : start + SLOT] = slot(cycle)

    async def read(self, function: int, address: int, count: int, device_id: int) -> list[int]:
        self.reads.append((function, address, count))
        return self.regs[address : address + count]

    async def write(self, address: int, values: list[int], device_id: int) -> None:
        raise AssertionError("the reader must not write")


def results(items: list[Any]) -> list[int]:
    return [i.cycle for i in items if isinstance(i, TestResult)]


async def running(image: Image, framer: str = "tcp") -> RingReader:
    """A reader that has seen the station's counter at 0 (nothing yet): gap detection armed."""
    r = RingReader("T1", "lf-mbtcp@1.0", compact(framer), ctx())
    assert (await r.poll(image)).items == []
    image.reads.clear()
    return r


async def test_counter_and_ring_come_in_one_read() -> None:
    image = Image()
    r = await running(image)
    for c in (1, 2):
        image.publish(c)
    out = await r.poll(image)
    assert results(out.items) == [1, 2]
    assert image.reads == [WHOLE]  # no slot reads, no second header read
    image.reads.clear()
    assert (await r.poll(image)).items == [] and image.reads == [WHOLE]
    image.publish(3)
    image.reads.clear()
    assert results((await r.poll(image)).items) == [3] and image.reads == [WHOLE]


async def test_the_result_is_the_one_three_reads_give() -> None:
    """The same slot through the one-read plan and through lf-mbtcp's three reads."""
    image = Image()
    one, three = await running(image), await running(image, "rtu")
    image.publish(1)
    a = [x for x in (await one.poll(image)).items if isinstance(x, TestResult)]
    b = [x for x in (await three.poll(image)).items if isinstance(x, TestResult)]
    assert len(a) == 1
    assert a == [dataclasses.replace(x, received_at=a[0].received_at) for x in b]


async def test_a_serial_line_keeps_the_small_reads() -> None:
    image = Image()
    r = await running(image, "rtu")
    image.publish(1)
    assert results((await r.poll(image)).items) == [1]
    assert [a for _, a, _ in image.reads] == [0, BASE + STRIDE, 0]


async def test_a_torn_slot_is_read_again_not_taken() -> None:
    image = Image()
    r = await running(image)
    image.publish(1, torn=True)
    out = await r.poll(image)
    assert results(out.items) == [] and out.torn == 1
    image.finish(1)
    assert results((await r.poll(image)).items) == [1]


async def test_a_ring_that_ran_over_is_a_gap() -> None:
    image = Image()
    r = await running(image)
    for c in range(1, 6):  # five results into a ring of three: 1 and 2 are overwritten
        image.publish(c)
    out = await r.poll(image)
    assert results(out.items) == [3, 4, 5]
    gaps = [i for i in out.items if isinstance(i, GapEvent)]
    assert [(g.first, g.last) for g in gaps] == [(1, 2)]
