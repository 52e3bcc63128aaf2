"""LatestReader against a scripted link: the consistency rules of change and counter detection.

The block is one lf-mbtcp slot encoded with pymodbus's ``convert_to_registers``
(station_image.py); the rules themselves are stated in gateway/profiles/modbus_schema.py.
"""

from __future__ import annotations

from typing import Any

import pytest

from gateway.drivers.base import ExceptionReply
from gateway.drivers.modbus_latest import LatestReader
from gateway.profiles.modbus_schema import AckAction, LatestRule
from gateway.profiles.model import BlockSpec
from gateway.records import TestResult
from tests.gateway.drivers.station_image import ctx, slot, spec

pytestmark = pytest.mark.timeout(10)


class Link:
    """Serves a queue of block images, one per read; records writes, can refuse them."""

    def __init__(self, images: list[list[int]]) -> None:
        self.images = images
        self.writes: list[tuple[int, list[int]]] = []
        self.refuse_writes = 0

    async def read(self, function: int, address: int, count: int, device_id: int) -> list[int]:
        return self.images.pop(0) if len(self.images) > 1 else self.images[0]

    async def write(self, address: int, values: list[int], device_id: int) -> None:
        if self.refuse_writes:
            self.refuse_writes -= 1
            raise ExceptionReply(6, "busy")
        self.writes.append((address, values))

    async def write_coil(self, address: int, value: bool, device_id: int) -> None:
        self.writes.append((address, [int(value)]))


def reader(rule: LatestRule, **kw: Any) -> LatestReader:
    block = BlockSpec(0, "uint32", 0, 30, 0, 28, spec().result.fields)
    return LatestReader("T1", spec(), block, rule, ctx(), **kw)


def cycles(items: list[Any]) -> list[int]:
    return [i.cycle for i in items if isinstance(i, TestResult)]


async def test_change_needs_two_equal_reads_and_a_half_written_block_is_not_taken() -> None:
    half = slot(5)[:15] + slot(4)[15:]  # the station was writing cycle 5 during this read
    link = Link([slot(4), slot(4), half, slot(5), slot(5), slot(5)])
    r = reader(LatestRule(detect="change", address=0, length=30, cycle_at=0,
                          cycle_type="uint32"))
    got: list[int] = []
    for _ in range(6):
        got += cycles((await r.poll(link)).items)
    assert got == [4, 5]  # each once; the half-written image never became a record


async def test_a_block_never_written_is_no_record() -> None:
    # first contact with a station just powered up: its block is all zeros until the first
    # result; two equal reads of it must not make a record of cycle 0
    link = Link([[0] * 30, [0] * 30, [0] * 30, slot(1), slot(1), slot(1)])
    r = reader(LatestRule(detect="change", address=0, length=30, cycle_at=0,
                          cycle_type="uint32"))
    got: list[int] = []
    for _ in range(6):
        out = await r.poll(link)
        got += cycles(out.items)
        assert not [i for i in out.items if not isinstance(i, TestResult)]
    assert got == [1]


async def test_counter_ack_that_fails_is_retried_and_the_record_kept() -> None:
    link = Link([slot(9)])
    link.refuse_writes = 1
    rule = LatestRule(detect="counter", address=0, length=30, cycle_at=0, cycle_type="uint32",
                      ack=(AckAction(function=6, address=100, value="cycle"),))
    r = reader(rule)
    first = await r.poll(link)
    assert cycles(first.items) == [9] and link.writes == []
    second = await r.poll(link)
    assert cycles(second.items) == [] and link.writes == [(100, [9])]


async def test_a_constant_acknowledge_is_written_as_given() -> None:
    link = Link([slot(3)])
    rule = LatestRule(detect="counter", address=0, length=30, cycle_at=0, cycle_type="uint32",
                      ack=(AckAction(function=6, address=7, value=0x55AA),))
    await reader(rule).poll(link)
    assert link.writes == [(7, [0x55AA])]


class Queue(Link):
    """Presents the oldest queued record; a write of its cycle moves on to the next."""

    def __init__(self, cycles: list[int]) -> None:
        super().__init__([slot(c) for c in cycles])
        self.cycles = cycles

    async def read(self, function: int, address: int, count: int, device_id: int) -> list[int]:
        return self.images[0]

    async def write(self, address: int, values: list[int], device_id: int) -> None:
        await super().write(address, values, device_id)
        if len(self.images) > 1 and values == [self.cycles[0] % 65536]:
            self.images.pop(0)
            self.cycles.pop(0)


async def test_counter_queue_across_the_16_bit_wrap_each_record_once() -> None:
    # a 16-bit cycle: the low word of the slot's u32 cycle (offset 1), queue 65534, 65535, 0
    link = Queue([65534, 65535, 65536, 65539])  # 65536 -> 0; 65539 -> 3: cycles 1, 2 dropped
    rule = LatestRule(detect="counter", address=0, length=30, cycle_at=1, cycle_type="uint16",
                      ack=(AckAction(function=6, address=100, value="cycle"),))
    block16 = BlockSpec(1, "uint16", 0, 30, 1, 29, spec().result.fields)
    r = LatestReader("T1", spec(), block16, rule, ctx())
    got: list[Any] = []
    for _ in range(6):
        got += (await r.poll(link)).items
    assert [i.cycle % 65536 for i in got if isinstance(i, TestResult)] == [65534, 65535, 0, 3]
    gaps = [i for i in got if type(i).__name__ == "GapEvent"]
    assert [(g.first, g.last) for g in gaps] == [(1, 2)]
