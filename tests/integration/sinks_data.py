"""Records of an invented shift at Northmere Works for the sink tests, and a forwarder runner."""

from __future__ import annotations

import asyncio
import contextlib
from collections.abc import AsyncIterator
from datetime import UTC, datetime, timedelta
from typing import Any

from gateway.records import CalibrationEvent, Record, StationState, StationStatus, TestResult
from gateway.sinks import Forwarder, SinkContext
from gateway.sinks.forwarder import JournalForwarder
from gateway.store.journal import Journal

T0 = datetime(2026, 3, 2, 6, 0, tzinfo=UTC)
STATIONS = {"L1-S1": "L1", "L1-S2": "L1", "L2-S1": "L2"}
PROGRAMS = {"L1-S1": "HX-210", "L1-S2": "HX-230", "L2-S1": "MV-44"}


def ctx(**kw: Any) -> SinkContext:
    base: dict[str, Any] = dict(
        site="northmere", gateway_id="gw-test", store_url="", stations=STATIONS
    )
    base.update(kw)
    return SinkContext(**base)


def result(station: str, cycle: int, **kw: Any) -> TestResult:
    ended = T0 + timedelta(seconds=37 * cycle, microseconds=123_457 * (cycle % 7))
    leak = round(0.05 + (cycle * 7919 % 1000) / 400.0, 4)
    verdict = "pass" if leak < 2.0 else ("gross" if leak > 2.4 else "reject")
    base: dict[str, Any] = dict(
        station=station, line=STATIONS[station], cycle=cycle, ended_at=ended,
        received_at=ended + timedelta(milliseconds=140), program=PROGRAMS[station],
        verdict=verdict, test_pressure_pa=300_000.0, pressure_loss_pa=round(leak * 24.0, 3),
        leak_rate_sccm=leak, reject_limit_sccm=2.0, fill_s=3.0, stabilise_s=6.0, test_s=4.0,
        part_id=f"{PROGRAMS[station]}-{cycle:06d}" if cycle % 5 else None,
        raw=f"{station};{cycle};{leak}", profile="lf-delim@1",
        temperature_c=21.5 if cycle % 2 else None,
    )  # fmt: skip
    base.update(kw)
    return TestResult(**base)


def calibration(station: str, n: int) -> CalibrationEvent:
    ended = T0 + timedelta(minutes=90 * n, seconds=3)
    return CalibrationEvent(
        station=station, line=STATIONS[station], ended_at=ended,
        received_at=ended + timedelta(seconds=1), program=PROGRAMS[station],
        master_loss_pa=10.0 + n, standard_loss_pa=58.0 + n, standard_sccm=2.0,
        standard_ref_pressure_pa=300_000.0, ratio=(58.0 + n) / (10.0 + n),
        sensitivity=2.0 / 48.0, passed=n % 4 != 3, reason="" if n % 4 != 3 else "ratio low",
        raw=f"CAL {station} {n}", profile="lf-delim@1",
    )  # fmt: skip


def status(station: str, n: int, state: str) -> StationStatus:
    return StationStatus(station=station, at=T0 + timedelta(minutes=n), state=StationState(state),
                         detail=f"step {n}")


def shift(first: int, last: int) -> list[Record]:
    """Results of cycles first..last on every station, a calibration every 20 cycles and a
    status change every 10, in time order."""
    out: list[Record] = []
    for cycle in range(first, last + 1):
        for station in STATIONS:
            out.append(result(station, cycle))
            if cycle % 20 == 0:
                out.append(calibration(station, cycle // 20))
            if cycle % 10 == 0:
                state = ("testing", "idle", "calibrating")[(cycle // 10) % 3]
                out.append(status(station, cycle, state))
    return out


@contextlib.asynccontextmanager
async def forwarding(fwd: Forwarder, journal: Journal) -> AsyncIterator[asyncio.Event]:
    """Run a forwarder on a task for the block; stop it (gracefully) at the end."""
    assert isinstance(fwd, JournalForwarder)
    stop = asyncio.Event()
    task = asyncio.create_task(fwd.run_with(journal, stop), name=f"forwarder {fwd.name}")
    try:
        yield stop
    finally:
        stop.set()
        async with asyncio.timeout(30):
            await task


async def until(predicate: Any, timeout: float, what: str) -> None:
    """Wait (polling) until ``predicate()`` holds; fail with ``what`` otherwise."""
    try:
        async with asyncio.timeout(timeout):
            while not predicate():
                await asyncio.sleep(0.05)
    except TimeoutError:
        raise AssertionError(f"timed out waiting for {what}") from None


def into_influx(journal: Journal, url: str, *, summaries: bool = True,
                batch_size: int = 200) -> None:
    """Forward everything in ``journal`` to the InfluxDB database at ``url`` and wait until the
    sink has confirmed it all (a read store with the journal's records); with ``summaries``
    the sink reads the journal's part summaries too, as a gateway's sink does."""
    from gateway.sinks.influx import make_influx

    journal_url = f"sqlite:///{journal.path}" if summaries else ""
    fwd = make_influx("influx", {"url": url, "batch_size": batch_size},
                      ctx(store_url=journal_url))

    async def forward() -> None:
        async with forwarding(fwd, journal):
            await until(lambda: sum(n for n, _ in journal.backlog("influx").values()) == 0, 30,
                        "everything in InfluxDB")

    asyncio.run(forward())
