"""The Modbus consistent read (sim/README.md, "Consistent read"), register by register.

Rule under test: read the counter, the slots not seen yet (at most a ring's depth back), the
counter again; accept a slot only when its head and tail guards equal the expected cycle and
the counter has not moved by a ring's depth in between. A torn block is retried, not
quarantined; only one that stays torn is.
"""

from __future__ import annotations

from typing import Any

import pytest

from gateway.drivers.modbus import RingReader, plan_reads
from gateway.records import CalibrationEvent, Rejected, StationStatus, TestResult
from tests.gateway.drivers.station_image import (
    BASE,
    DEPTH,
    STRIDE,
    StationImage,
    busy,
    ctx,
    spec,
)

pytestmark = pytest.mark.timeout(10)


def reader(**kw: Any) -> RingReader:
    modbus = kw.pop("spec", None) or spec()
    return RingReader("T1", "lf-mbtcp@1.0", modbus, ctx(), **kw)


def results(items: list[Any]) -> list[int]:
    return [i.cycle for i in items if isinstance(i, TestResult)]


def test_plan_reads_merges_the_header_into_one_read() -> None:
    # state (0), result counter (1-2), calibration counter (3-4): one read of 5 registers
    assert plan_reads([(1, 2), (3, 2), (0, 1)]) == [(0, 5)]
    # far apart or beyond the 125-register limit (Modbus spec 6.3): separate reads
    assert plan_reads([(0, 1), (1000, 2)]) == [(0, 1), (1000, 2)]
    assert plan_reads([(0, 100), (110, 30)]) == [(0, 100), (110, 30)]


async def test_nothing_yet_reads_only_the_header() -> None:
    image = StationImage()
    out = await reader().poll(image)
    assert out.items == [] and out.counter == 0
    assert image.reads == [(3, 0, 5)]


async def test_new_results_are_read_once_in_order() -> None:
    image, r = StationImage(), reader()
    for c in (1, 2, 3):
        image.publish(c)
    out = await r.poll(image)
    assert results(out.items) == [1, 2, 3]
    # header, three slots, header again
    assert [a for _, a, _ in image.reads] == [0, BASE + STRIDE, BASE + 2 * STRIDE,
                                              BASE + 3 * STRIDE, 0]
    image.reads.clear()
    out = await r.poll(image)
    assert out.items == [] and image.reads == [(3, 0, 5)]  # nothing new: header only
    image.publish(4)
    assert results((await r.poll(image)).items) == [4]


async def test_first_contact_reads_at_most_a_ring_back() -> None:
    image, r = StationImage(), reader()
    for c in range(1, 21):
        image.publish(c)
    out = await r.poll(image)
    assert results(out.items) == list(range(21 - DEPTH, 21))
    assert out.missed == 0  # history before the gateway started is not a gap


async def test_more_missed_than_the_ring_holds_is_recorded_as_a_gap() -> None:
    image, r = StationImage(), reader()
    image.publish(1)
    await r.poll(image)
    for c in range(2, 14):  # 12 new results, ring depth 8
        image.publish(c)
    out = await r.poll(image)
    assert results(out.items) == list(range(14 - DEPTH, 14))
    assert out.missed == 4
    gaps = [i for i in out.items if isinstance(i, StationStatus)]
    assert len(gaps) == 1 and "cycles 2..5" in gaps[0].detail


async def test_torn_block_is_retried_not_quarantined() -> None:
    image, r = StationImage(), reader()
    image.publish(1)
    await r.poll(image)
    image.publish(2, torn=True)  # counter already says 2, the slot is half written
    out = await r.poll(image)
    assert out.torn == 1 and out.items == []
    assert r.seen == 1  # not advanced: the station still holds cycle 2
    image.finish_torn(2)
    out = await r.poll(image)
    assert results(out.items) == [2] and out.torn == 0


async def test_results_after_a_torn_one_are_kept_and_the_torn_one_reread() -> None:
    image, r = StationImage(), reader()
    image.publish(1)
    image.publish(2, torn=True)
    image.publish(3)  # the station moved on; slot 2 is still torn (careless firmware)
    out = await r.poll(image)
    assert results(out.items) == [1, 3] and out.torn == 1
    image.finish_torn(2)
    out = await r.poll(image)
    # cycle 2 now, cycle 3 again: the journal's unique key makes the repeat harmless
    assert results(out.items) == [2, 3]
    assert r.seen == 3


async def test_a_block_that_stays_torn_goes_to_quarantine_once() -> None:
    image, r = StationImage(), reader()
    image.publish(1, torn=True)
    outs = [await r.poll(image) for _ in range(5)]
    assert all(not o.items for o in outs[:4])
    rejected = [i for i in outs[4].items if isinstance(i, Rejected)]
    assert len(rejected) == 1 and "still inconsistent after 5 reads" in rejected[0].reason
    assert r.seen == 1
    assert (await r.poll(image)).items == []


async def test_consistent_but_undecodable_block_is_quarantined_at_once() -> None:
    image, r = StationImage(), reader()
    image.publish(1)
    start = BASE + STRIDE * 1
    image.regs[start + 5] = 99  # a verdict code no profile knows
    out = await r.poll(image)
    rejected = [i for i in out.items if isinstance(i, Rejected)]
    assert len(rejected) == 1 and "99" in rejected[0].reason and out.torn == 0
    assert r.seen == 1


async def test_slot_overwritten_during_the_read_is_not_accepted() -> None:
    image, r = StationImage(), reader()
    image.publish(1)
    await r.poll(image)
    image.publish(2)

    def burst(img: StationImage, address: int, count: int) -> bool:
        if address == BASE + 2 * STRIDE:  # right after slot 2 was read: 8 more results
            for c in range(3, 11):
                img.publish(c)
            return True
        return False

    image.hooks.append(burst)
    out = await r.poll(image)
    # counter went 2 -> 10 meanwhile: slot 2 may be cycle 10 now, so it is not accepted
    assert results(out.items) == []
    out = await r.poll(image)
    assert results(out.items) == list(range(3, 11))
    assert out.missed == 1  # cycle 2 was overwritten before a consistent read


async def test_counter_moving_within_the_ring_keeps_what_was_read() -> None:
    image, r = StationImage(), reader()
    image.publish(1)

    def one_more(img: StationImage, address: int, count: int) -> bool:
        if address == BASE + STRIDE:
            img.publish(2)
            return True
        return False

    image.hooks.append(one_more)
    out = await r.poll(image)
    assert results(out.items) == [1]  # counter moved by 1 < depth: slot 1 still valid
    assert results((await r.poll(image)).items) == [2]


async def test_counter_going_back_rereads_the_ring() -> None:
    image, r = StationImage(), reader(resume_cycle=500)
    image.publish(1)
    image.publish(2)
    out = await r.poll(image)  # a replaced controller starts counting again
    assert results(out.items) == [1, 2]


async def test_resume_after_restart_rereads_the_ring_and_reports_real_gaps_only() -> None:
    image = StationImage()
    for c in range(1, 11):
        image.publish(c)
    r = reader(resume_cycle=8)  # the journal had up to 8
    out = await r.poll(image)
    assert results(out.items) == list(range(3, 11))  # whole ring again: repeats are harmless
    assert out.missed == 0
    r = reader(resume_cycle=1)
    out = await r.poll(image)
    assert out.missed == 1  # cycle 2 is gone from an 8-deep ring at counter 10


async def test_exception_response_propagates_and_nothing_advances() -> None:
    image, r = StationImage(), reader()
    image.publish(1)
    image.fail_next.append(busy())
    with pytest.raises(Exception, match="exception response 06"):
        await r.poll(image)
    assert r.seen is None
    assert results((await r.poll(image)).items) == [1]


async def test_store_down_leaves_results_in_the_station() -> None:
    image, r = StationImage(), reader()
    image.publish(1)
    out = await r.poll(image, take_results=False)
    assert out.items == [] and image.reads == [(3, 0, 5)]
    assert results((await r.poll(image)).items) == [1]


async def test_calibration_block_read_once_per_counter() -> None:
    image, r = StationImage(), reader()
    image.calibrate(1)
    out = await r.poll(image)
    assert sum(isinstance(i, CalibrationEvent) for i in out.items) == 1
    assert not [i for i in (await r.poll(image)).items if isinstance(i, CalibrationEvent)]
    image.calibrate(2)
    assert sum(isinstance(i, CalibrationEvent) for i in (await r.poll(image)).items) == 1


async def test_calibration_counter_moving_during_the_read_is_retried() -> None:
    image, r = StationImage(), reader()
    image.calibrate(1)

    def recal(img: StationImage, address: int, count: int) -> bool:
        if address == 400:
            img.calibrate(2)
            return True
        return False

    image.hooks.append(recal)
    out = await r.poll(image)
    assert not [i for i in out.items if isinstance(i, CalibrationEvent)]
    out = await r.poll(image)
    cals = [i for i in out.items if isinstance(i, CalibrationEvent)]
    assert len(cals) == 1 and r.cal_seen == 2


async def test_reader_never_writes_without_an_acknowledge_register() -> None:
    image, r = StationImage(), reader()
    image.publish(1)
    await r.poll(image)
    assert r.pending_ack() is None and image.writes == []


async def test_acknowledge_register_when_the_profile_enables_it() -> None:
    import dataclasses

    from gateway.profiles import AckSpec

    image = StationImage()
    r = reader(spec=dataclasses.replace(spec(), acknowledge=AckSpec(address=50, type="uint32")))
    image.publish(1)
    image.publish(2)
    await r.poll(image)
    assert r.pending_ack() == (50, [0, 2])
    assert r.pending_ack() is None  # once per new cycle


class _WrapImage(StationImage):
    """A station whose 32-bit counter is near its maximum (times kept in range)."""

    def publish(self, cycle: int, *, torn: bool = False) -> None:
        from tests.gateway.drivers.station_image import slot, u32

        wrapped = cycle % 2**32
        regs = slot(cycle % 997)
        regs[0:2] = u32(wrapped)  # head guard
        regs[28:30] = u32(wrapped)  # tail guard
        start = BASE + STRIDE * (wrapped % DEPTH)
        self.regs[start : start + len(regs)] = regs
        self.regs[1:3] = u32(wrapped)
        self.counter = wrapped


async def test_a_counter_wrap_keeps_the_record_numbered_0() -> None:
    """The station counts ..., 2^32 − 1, 0, 1: three new cycles, not a reset."""
    image, r = _WrapImage(), reader()
    top = 2**32 - 1
    for c in range(top - 9, top):  # 4294967286 .. 4294967294
        image.publish(c)
    first = await r.poll(image)
    assert results(first.items) == list(range(top - DEPTH, top))
    for c in (top, top + 1, top + 2):  # the station's 4294967295, 0, 1
        image.publish(c)
    out = await r.poll(image)
    assert results(out.items) == [top, 0, 1]
    assert out.missed == 0 and not [i for i in out.items if isinstance(i, StationStatus)]
    image.publish(top + 3)
    assert results((await r.poll(image)).items) == [2]


async def test_a_counter_that_goes_back_is_still_a_reset() -> None:
    image, r = StationImage(), reader()
    for c in range(1, 501):
        image.publish(c)
    await r.poll(image)
    image.regs = [0] * 600
    for c in (1, 2, 3):
        image.publish(c)
    out = await r.poll(image)
    assert results(out.items) == [1, 2, 3]  # the reset station's ring is read again


async def test_a_failed_slot_read_keeps_the_slots_before_it() -> None:
    """A poll is not all-or-nothing: slots read before a refused one are taken now, the
    rest at the next poll, nothing lost or doubled."""
    from tests.gateway.drivers.station_image import busy

    class Flaky(StationImage):
        fail_at: int | None = None

        async def read(self, function: int, address: int, count: int,
                       device_id: int) -> list[int]:
            if address == self.fail_at:
                self.fail_at = None
                raise busy()
            return await super().read(function, address, count, device_id)

    image, r = Flaky(), reader()
    for c in range(1, 6):
        image.publish(c)
    image.fail_at = BASE + STRIDE * 4  # cycle 4's slot refuses once
    first = await r.poll(image)
    assert results(first.items) == [1, 2, 3]
    second = await r.poll(image)
    assert results(second.items) == [4, 5]
    assert first.missed == second.missed == 0


async def test_a_never_written_slot_whose_first_read_failed_is_skipped_not_torn() -> None:
    # first contact with a station whose ring holds only cycle 10: the slots of 3..9 were
    # never written (zeros). The read of one of them fails (busy); when it is read again at
    # the next poll it is still the first look at it: skipped, never quarantined as torn
    image, r = StationImage(), reader()
    image.publish(10)
    target = BASE + STRIDE * (5 % DEPTH)
    failed = []

    async def read(function: int, address: int, count: int, device_id: int) -> list[int]:
        if address == target and not failed:
            failed.append(address)
            raise busy()
        return await StationImage.read(image, function, address, count, device_id)

    image.read = read  # type: ignore[method-assign]
    got: list[Any] = []
    for _ in range(8):
        got += (await r.poll(image)).items
    assert failed and results(got) == [10]
    assert not [i for i in got if isinstance(i, Rejected)], got
