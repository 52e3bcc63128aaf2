"""Result counters that wrap (65535 -> 0, 4294967295 -> 0) lose nothing at the wrap.

Counter arithmetic modulo 2^16 / 2^32 is how unsigned registers behave (Modbus registers are
16-bit words, Modbus application protocol spec 1.1b3, 4.2); the station image is encoded with
pymodbus's ``convert_to_registers``, independently of the reader's decoding.
"""

from __future__ import annotations

import dataclasses
from typing import Any

import pytest

from gateway.drivers.base import LinkLost
from gateway.drivers.modbus import RingReader
from gateway.records import GapEvent, Rejected, StationStatus, TestResult
from tests.gateway.drivers import station_image
from tests.gateway.drivers.station_image import StationImage, busy, ctx, spec

pytestmark = pytest.mark.timeout(10)


def spec16() -> Any:
    """lf-mbtcp's map read as a 16-bit counter: the low words of its u32 counter and guards."""
    base = spec()
    ring = dataclasses.replace(
        base.result, counter_type="uint16", counter_address=base.result.counter_address + 1,
        head_guard=base.result.head_guard + 1, tail_guard=base.result.tail_guard + 1,
    )
    return dataclasses.replace(base, result=ring)


def cycles(items: list[Any]) -> list[int]:
    return [i.cycle for i in items if isinstance(i, TestResult)]


class Image16(StationImage):
    """Publishes with a 16-bit counter: the high word of the u32 image stays 0."""

    def publish(self, cycle: int, *, torn: bool = False) -> None:
        super().publish(cycle % 65536, torn=torn)


async def test_16_bit_counter_wrap_keeps_the_result_numbered_0() -> None:
    image, r = Image16(), RingReader("T1", "t", spec16(), ctx())
    for c in (65533, 65534):
        image.publish(c)
    first = await r.poll(image)
    assert cycles(first.items) == [65533, 65534]
    for c in (65535, 0, 1):
        image.publish(c)
    out = await r.poll(image)
    assert cycles(out.items) == [65535, 0, 1]
    assert out.missed == 0 and not [i for i in out.items if isinstance(i, StationStatus)]
    image.publish(2)
    assert cycles((await r.poll(image)).items) == [2]


async def test_32_bit_counter_wrap_keeps_the_result_numbered_0(
    monkeypatch: pytest.MonkeyPatch,
) -> None:
    plain = station_image.slot

    def slot(cycle: int, *, verdict: int = 1) -> list[int]:
        regs = plain(cycle % 1000, verdict=verdict)  # a time that fits its u32 register
        regs[0:2] = regs[28:30] = station_image.u32(cycle)
        return regs

    monkeypatch.setattr(station_image, "slot", slot)
    image, r = StationImage(), RingReader("T1", "t", spec(), ctx())
    image.publish(4294967294)
    assert cycles((await r.poll(image)).items) == [4294967294]
    for c in (4294967295, 0, 1):
        image.publish(c)
    out = await r.poll(image)
    assert cycles(out.items) == [4294967295, 0, 1] and out.missed == 0


async def test_gap_across_the_wrap_names_the_wrapped_range() -> None:
    image, r = Image16(), RingReader("T1", "t", spec16(), ctx())
    image.publish(65530)
    await r.poll(image)
    for c in range(65531, 65536 + 12):  # 17 new cycles, the ring holds 8
        image.publish(c)
    out = await r.poll(image)
    assert cycles(out.items) == [c % 65536 for c in range(65536 + 4, 65536 + 12)]
    assert out.missed == 9  # 65531..65535 and 0..3
    status = [i for i in out.items if isinstance(i, StationStatus)]
    assert len(status) == 1 and "65531..3" in (status[0].detail or "")


async def test_counter_0_at_first_contact_arms_gap_detection() -> None:
    image, r = Image16(), RingReader("T1", "t", spec16(), ctx())
    out = await r.poll(image)
    assert out.items == [] and len(image.reads) == 1  # header only: nothing to read yet
    for c in range(1, 12):  # 11 cycles, the ring holds 8: cycles 1..3 were overwritten
        image.publish(c)
    out = await r.poll(image)
    assert cycles(out.items) == list(range(4, 12)) and out.missed == 3


async def test_first_contact_skips_slots_never_written_or_holding_older_cycles() -> None:
    image, r = Image16(), RingReader("T1", "t", spec16(), ctx(), resume_cycle=65534)
    for c in (65535, 0, 1):  # the rest of the ring was never written
        image.publish(c)
    out = await r.poll(image)
    assert cycles(out.items) == [65535, 0, 1]
    assert [i for i in out.items if isinstance(i, Rejected)] == [] and out.torn == 0


async def test_station_reset_rereads_its_ring() -> None:
    image, r = Image16(), RingReader("T1", "t", spec16(), ctx())
    for c in range(1, 6):
        image.publish(c)
    assert cycles((await r.poll(image)).items) == [1, 2, 3, 4, 5]
    image.regs[100:400] = [0] * 300  # a reset station clears its ring and counts again
    image.publish(1)
    out = await r.poll(image)
    assert cycles(out.items) == [1]
    assert [i for i in out.items if isinstance(i, Rejected)] == []


async def test_gap_is_kept_when_a_later_read_of_the_poll_fails() -> None:
    image, r = Image16(), RingReader("T1", "t", spec16(), ctx())
    image.publish(1)
    await r.poll(image)
    for c in range(2, 15):  # 13 new cycles, the ring holds 8: cycles 2..6 lost
        image.publish(c)

    def fail_second_header(img: StationImage, address: int, count: int) -> bool:
        if address == 0 and len(img.reads) > 2:
            img.fail_next.append(LinkLost("cable pulled"))
            return True
        return False

    image.hooks.append(fail_second_header)
    with pytest.raises(LinkLost):
        await r.poll(image)
    gaps = [i for i in r.drain_pending() if isinstance(i, GapEvent)]
    assert [(g.first, g.last, g.source) for g in gaps] == [(2, 6, "ring")]
    # the next poll reads the slots again; the gap is not reported twice
    out = await r.poll(image)
    assert cycles(out.items) == list(range(7, 15))
    assert not [i for i in out.items if isinstance(i, GapEvent)]


async def test_a_slot_that_cannot_be_read_does_not_lose_the_others() -> None:
    image, r = Image16(), RingReader("T1", "t", spec16(), ctx())
    image.publish(1)
    await r.poll(image)
    for c in (2, 3, 4):
        image.publish(c)
    refused = {100 + 32 * 3}  # the slot of cycle 3 (BASE + STRIDE * 3)

    real_read = image.read

    async def read(function: int, address: int, count: int, device_id: int) -> list[int]:
        if address in refused:
            refused.clear()
            raise busy()
        return await real_read(function, address, count, device_id)

    image.read = read  # type: ignore[method-assign]
    out = await r.poll(image)
    assert cycles(out.items) == [2] and out.unread == 1  # reading stops at the refused slot
    out = await r.poll(image)  # 3 and 4 are read now
    assert cycles(out.items) == [3, 4]
