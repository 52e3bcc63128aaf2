"""The runtime's journal writer: batching, bounded latency, holding on store errors, flushing."""

from __future__ import annotations

import asyncio
import threading
from dataclasses import dataclass, field
from datetime import UTC, datetime
from typing import Any

import pytest

from gateway.errors import StoreError
from gateway.health import Backoff, StationHealth
from gateway.records import StationState, StationStatus
from gateway.runtime import JournalWriter

pytestmark = pytest.mark.timeout(20)


@dataclass
class FakeJournal:
    """Records each write's batch and the thread it ran on; can be made to fail."""

    batches: list[list[Any]] = field(default_factory=list)
    threads: set[int] = field(default_factory=set)
    failing: bool = False
    closed: bool = False

    def write(self, items: list[Any]) -> Any:
        self.threads.add(threading.get_ident())
        if self.failing:
            raise StoreError("journal x.db: disk full (or journal size limit reached)")
        self.batches.append(list(items))

        @dataclass
        class Stats:
            inserted: int
            duplicates: int = 0
            quarantined: int = 0

        return Stats(len(items))

    def close(self) -> None:
        self.closed = True

    @property
    def stored(self) -> list[Any]:
        return [i for b in self.batches for i in b]


def status(n: int) -> StationStatus:
    return StationStatus("S1", datetime(2026, 12, 2, 6, 0, n % 60, tzinfo=UTC),
                         StationState.ONLINE, detail=str(n))


async def wait_for(cond: Any, timeout: float = 5.0) -> None:
    for _ in range(int(timeout / 0.005)):
        if cond():
            return
        await asyncio.sleep(0.005)
    raise AssertionError("condition not met")


async def test_items_are_batched_and_committed_soon_after_arrival() -> None:
    journal = FakeJournal()
    writer = JournalWriter(lambda: journal, batch_size=100, max_delay_s=0.05)
    task = asyncio.create_task(writer.run())
    for n in range(10):
        await writer.put([status(n)])
    await wait_for(lambda: len(journal.stored) == 10)
    assert len(journal.batches) == 1  # ten small puts, one transaction
    await writer.close()
    await task
    assert journal.closed and len(journal.threads) == 1  # one thread owns the journal


async def test_a_full_batch_is_written_without_waiting() -> None:
    journal = FakeJournal()
    writer = JournalWriter(lambda: journal, batch_size=5, max_delay_s=0.2)
    task = asyncio.create_task(writer.run())
    await writer.put([status(n) for n in range(12)])
    await wait_for(lambda: len(journal.stored) == 12)
    assert [len(b) for b in journal.batches][:2] == [5, 5]
    await writer.close()
    await task


async def test_store_errors_hold_items_and_stop_modbus_intake_until_it_recovers() -> None:
    journal = FakeJournal(failing=True)
    writer = JournalWriter(lambda: journal, batch_size=50, max_delay_s=0.01,
                           retry_initial_s=0.01, retry_max_s=0.02)
    task = asyncio.create_task(writer.run())
    await writer.put([status(n) for n in range(7)])
    await wait_for(lambda: not writer.accepting)
    assert journal.stored == []
    await writer.put([status(7)])
    journal.failing = False
    await wait_for(lambda: len(journal.stored) == 8)
    assert writer.accepting
    assert [i.detail for i in journal.stored] == [str(n) for n in range(8)]  # order kept
    await writer.close()
    await task


async def test_close_flushes_everything_queued() -> None:
    journal = FakeJournal()
    writer = JournalWriter(lambda: journal, batch_size=3, max_delay_s=0.2)
    task = asyncio.create_task(writer.run())
    for n in range(20):
        await writer.put([status(n)])
    await writer.close()
    await task
    assert len(journal.stored) == 20


async def test_bounded_memory_makes_producers_wait() -> None:
    journal = FakeJournal(failing=True)
    writer = JournalWriter(lambda: journal, batch_size=10, max_delay_s=0.01, queue_size=2,
                           max_pending=100, retry_initial_s=0.01, retry_max_s=0.02)
    task = asyncio.create_task(writer.run())

    async def produce() -> None:
        for n in range(300):
            await writer.put([status(n)])

    producer = asyncio.create_task(produce())
    await asyncio.sleep(0.3)
    assert not producer.done()  # back-pressure: the producer is waiting, nothing dropped
    assert writer.pending <= 100 + 2
    journal.failing = False
    await producer
    await writer.close()
    await task
    assert len(journal.stored) == 300


def test_backoff_is_capped_and_jittered() -> None:
    import random

    b = Backoff(0.5, 4.0, random.Random(1))
    delays = [b.next() for _ in range(8)]
    # each delay lies in [step/2, step], step = min(cap, 0.5·2ⁿ): 0.5, 1, 2, 4, 4, ...
    steps = [0.5, 1, 2, 4, 4, 4, 4, 4]
    assert all(s / 2 <= d <= s for d, s in zip(delays, steps, strict=True))
    b.reset()
    assert b.next() <= 0.5


def test_health_logs_error_once_and_info_on_recovery(caplog: pytest.LogCaptureFixture) -> None:
    h = StationHealth("S9", offline_after=2)
    caplog.set_level("DEBUG", logger="gateway.health")
    assert h.succeeded() is not None  # start -> online
    assert h.failed("timeout") is None  # tolerated once
    s = h.failed("timeout")
    assert s is not None and s.state is StationState.OFFLINE
    assert h.failed("timeout") is None
    errors = [r for r in caplog.records if r.levelname == "ERROR"]
    assert len(errors) == 1
    s = h.succeeded()
    assert s is not None and s.state is StationState.ONLINE
    assert any(r.levelname == "INFO" and "recovered" in r.message for r in caplog.records)


def test_clock_set_back_is_noted_once_and_rereads_are_not() -> None:
    from datetime import timedelta

    from gateway.health import ClockWatch

    watch = ClockWatch(tolerance_s=300)
    t = datetime(2026, 10, 25, 2, 30, tzinfo=UTC)
    assert watch.check("S1", 10, t) is None
    assert watch.check("S1", 11, t + timedelta(seconds=30)) is None
    assert watch.check("S1", 9, t - timedelta(minutes=5)) is None  # an older cycle re-read
    note = watch.check("S1", 12, t - timedelta(minutes=29))  # daylight saving: back an hour
    assert note is not None and "cycle 12" in note and "30 min before cycle 11" in note
    assert watch.check("S1", 13, t - timedelta(minutes=28)) is None  # the new time goes on


def test_clock_set_forward_is_noted_and_a_long_pause_is_not() -> None:
    from datetime import timedelta

    from gateway.health import ClockWatch

    watch = ClockWatch(tolerance_s=300)
    t = datetime(2026, 12, 3, 8, 0, tzinfo=UTC)
    assert watch.check("S1", 1, t, t + timedelta(seconds=1)) is None
    # a weekend's pause: both clocks move on together
    later = t + timedelta(days=2)
    assert watch.check("S1", 2, later, later + timedelta(seconds=1)) is None
    # the station clock set forward by a year: its offset from the gateway's jumps
    note = watch.check("S1", 3, later + timedelta(days=365), later + timedelta(seconds=40))
    assert note is not None and "set forward" in note and "cycle 3" in note
