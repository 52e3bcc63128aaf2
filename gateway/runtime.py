"""The running gateway: one task per bus, one journal writer, the forwarders, clean shutdown.

Task layout (all owned by one ``asyncio.TaskGroup``)::

    bus tasks (one per serial line / TCP endpoint)  ──put──>  JournalWriter  ──>  Journal.write
      └ serial stream | request/response | Modbus poll         (bounded queue,      (one thread)
                                                               group commit)
    forwarders (sinks), each reading the journal from its own cursor, woken by each commit

Back-pressure: the writer holds what it could not store yet (journal full or read-only) in a
bounded buffer and retries with backoff. While it is failing, ``accepting`` is false and Modbus
pollers stop reading result slots, so stations keep results in their rings; streaming lines are
held in memory up to the bound, after which readers wait (and TCP pushes back on the station).
A bus task that dies of a bug is logged and restarted; it never takes the others down.

Metrics (``gateway.metrics``, served on 127.0.0.1 when ``[metrics] prometheus_port`` is set):
what the drivers hand over is counted per station and kind as it passes the outbox, what the
journal newly committed (repeats excluded) after each write, so ``records_stored`` and
``records_rejected`` equal what the journal holds; state changes come from the same status
records the journal gets.
"""

from __future__ import annotations

import asyncio
import concurrent.futures
import contextlib
import logging
import signal
import sqlite3
import time
from collections import deque
from collections.abc import Awaitable, Callable, Mapping, Sequence
from dataclasses import dataclass, field
from datetime import timedelta
from pathlib import Path
from typing import Any

from gateway import metrics
from gateway.aio import Pulse, within
from gateway.config import GatewayConfig
from gateway.drivers.base import Item, Outbox, Pacing, StationTarget, utcnow
from gateway.errors import ConfigError, StoreError
from gateway.garbage import GarbageLimiter
from gateway.health import Backoff, ClockWatch
from gateway.records import CalibrationEvent, Rejected, StationState, StationStatus, TestResult
from gateway.sinks import REGISTRY, Attachable, Forwarder, SinkContext, SinkFactory
from gateway.store.guard import JournalGone, JournalLock, cap_quarantine, spill, take_back
from gateway.store.journal import KINDS

__all__ = [
    "Forwarder",
    "JournalWriter",
    "Runtime",
    "SinkContext",
    "build_targets",
    "resume_points",
    "run_gateway",
]

log = logging.getLogger(__name__)


# -- sinks ------------------------------------------------------------------------------------
def sink_registry() -> Mapping[str, SinkFactory]:
    """Sink type → factory; sink modules register themselves when imported."""
    import importlib

    for module in ("gateway.sinks.mqtt", "gateway.sinks.influx", "gateway.sinks.sparkplug.node",
                   "gateway.sinks.opcua"):
        try:
            importlib.import_module(module)
        except ImportError as exc:
            if exc.name != module:
                log.debug("sink module %s unavailable: %s", module, exc)
    return REGISTRY


def build_forwarders(config: GatewayConfig) -> list[Forwarder]:
    """One forwarder per ``[sinks.<name>]`` table; a mistake is a ConfigError naming the table."""
    if not config.sinks:
        return []
    registry = sink_registry()
    ctx = SinkContext(
        site=config.site,
        gateway_id=config.gateway_id,
        store_url=config.store,
        stations={s.id: s.line for s in config.stations},
    )
    out: list[Forwarder] = []
    for name, table in config.sinks.items():
        kind = str(table.get("type", name))
        factory = registry.get(kind)
        if factory is None:
            known = ", ".join(sorted(registry)) or "none installed"
            raise ConfigError(
                f"{config.source}: sinks.{name}: unknown sink type {kind!r} (known: {known})"
            )
        options = {k: v for k, v in table.items() if k != "type"}
        try:
            out.append(factory(name, options, ctx))
        except (ValueError, TypeError, KeyError) as exc:
            raise ConfigError(f"{config.source}: sinks.{name}: {exc}") from exc
    return out


# -- the journal writer -----------------------------------------------------------------------
JournalFactory = Callable[[], Any]


class JournalWriter:
    """The single writer: batches items into ``Journal.write`` calls on one dedicated thread.

    Group commit: a batch is written as soon as the writer thread is free, with whatever arrived
    meanwhile (up to ``batch_size``), so a lone result is committed at once and batches grow by
    themselves under load; ``max_delay_s`` > 0 makes a batch wait that long for company.
    Nothing is dropped on a store error: items stay in ``pending`` (bounded by
    ``max_pending``) and the batch is retried.
    """

    def __init__(
        self,
        open_journal: JournalFactory,
        *,
        batch_size: int = 500,
        max_delay_s: float = 0.0,
        queue_size: int = 2000,
        max_pending: int = 100_000,
        retry_initial_s: float = 0.5,
        retry_max_s: float = 10.0,
    ) -> None:
        self._open = open_journal
        self.batch_size = batch_size
        self.max_delay_s = max_delay_s
        self.max_pending = max_pending
        self._queue: asyncio.Queue[list[Item] | None] = asyncio.Queue(maxsize=queue_size)
        self._pending: deque[Item] = deque()
        self._oldest: float | None = None  # loop time the oldest pending item arrived
        self._executor = concurrent.futures.ThreadPoolExecutor(1, thread_name_prefix="journal")
        self._journal: Any = None
        self._retry = Backoff(retry_initial_s, retry_max_s)
        self.fatal: str | None = None  # why the writer stopped for good (journal gone ...)
        self.on_fatal: Callable[[], None] | None = None
        self.journal_path: Path | None = None  # for the spill file
        self.spilled = 0
        self._failing: str | None = None
        self._closing = False
        self.committed = Pulse()  # fired after every commit: forwarders wake instead of polling
        self.stats: dict[str, int] = {"inserted": 0, "duplicates": 0, "quarantined": 0,
                                      "failed_writes": 0}

    # Outbox -----------------------------------------------------------------------------------
    async def put(self, items: Sequence[Item]) -> None:
        if items:
            await self._queue.put(list(items))

    @property
    def accepting(self) -> bool:
        return self._failing is None and len(self._pending) < self.max_pending // 2

    @property
    def pending(self) -> int:
        return len(self._pending) + self._queue.qsize()  # queued puts, a few items each

    # lifecycle ----------------------------------------------------------------------------------
    async def open(self) -> Any:
        """Open the journal on the writer's thread (so every call to it happens there)."""
        loop = asyncio.get_running_loop()
        self._journal = await loop.run_in_executor(self._executor, self._open)
        return self._journal

    async def call(self, fn: Callable[..., Any], *args: Any) -> Any:
        """Run ``fn(journal, *args)`` on the writer's thread (resume points, tests)."""
        loop = asyncio.get_running_loop()
        return await loop.run_in_executor(self._executor, fn, self._journal, *args)

    async def save_cursor(self, sink: str, kind: str, seq: int) -> bool:
        """A sink's cursor, written between batches on the writer's own connection: one
        writer, so neither waits on the other's lock (SQLite's busy back-off sleeps up to
        tens of milliseconds, which a live sink would show as latency)."""
        if self._journal is None:  # closed (the sinks' last drain at shutdown): not here
            return False
        await self.call(lambda j: j.set_cursor(sink, kind, seq))
        return True

    async def close(self) -> None:
        """Ask ``run`` to store everything queued and return."""
        self._closing = True
        await self._queue.put(None)

    async def run(self, *, shutdown_grace_s: float = 10.0) -> None:
        if self._journal is None:
            await self.open()
        loop = asyncio.get_running_loop()
        closed_at: float | None = None
        try:
            while True:
                if not self._pending and not self._closing:
                    first = await self._queue.get()
                    if first is None:
                        self._closing = True
                    else:
                        self._take(first, loop.time())
                self._drain_queue(loop.time())
                if (
                    not self._closing
                    and len(self._pending) < self.batch_size
                    and self._failing is None
                    and self._oldest is not None
                ):
                    wait = self._oldest + self.max_delay_s - loop.time()
                    if wait > 0:
                        await self._collect_until(loop.time() + wait)
                if self._pending:
                    ok = await self._write_batch()
                    if self.fatal is not None:
                        return
                    if not ok:
                        if self._closing:
                            closed_at = closed_at or loop.time()
                            if loop.time() - closed_at > shutdown_grace_s:
                                log.error(
                                    "journal still failing at shutdown: %d item(s) not stored",
                                    len(self._pending),
                                )
                                self.fatal = "journal failing at shutdown"
                                self._spill_pending()
                                return
                        await self._collect_until(loop.time() + self._retry.next())
                    continue
                if self._closing and self._queue.empty():
                    return
        finally:
            await self._close_journal()

    # internals ----------------------------------------------------------------------------------
    def _take(self, items: list[Item], now: float) -> None:
        if not self._pending:
            self._oldest = now
        self._pending.extend(items)

    def _drain_queue(self, now: float) -> None:
        while len(self._pending) < self.max_pending:
            try:
                items = self._queue.get_nowait()
            except asyncio.QueueEmpty:
                return
            if items is None:
                self._closing = True
            else:
                self._take(items, now)

    async def _collect_until(self, deadline: float) -> None:
        """Keep taking arrivals (up to the bounds) until ``deadline`` or a full batch."""
        loop = asyncio.get_running_loop()
        while True:
            remaining = deadline - loop.time()
            if remaining <= 0 or len(self._pending) >= self.max_pending:
                if remaining > 0:
                    await asyncio.sleep(remaining)  # full: producers wait on the queue
                return
            if self._failing is None and len(self._pending) >= self.batch_size:
                return
            try:
                items = await within(self._queue.get(), remaining)
            except TimeoutError:
                return
            if items is None:
                self._closing = True
                return
            self._take(items, loop.time())

    async def _write_batch(self) -> bool:
        n = min(self.batch_size, len(self._pending))
        batch = [self._pending[i] for i in range(n)]
        loop = asyncio.get_running_loop()
        try:
            stats, stored = await loop.run_in_executor(self._executor, _write_counted,
                                                       self._journal, batch)
        except JournalGone as exc:
            self.fatal = str(exc)
            log.error("%s", exc)
            rescued = await loop.run_in_executor(self._executor, self._journal.rescue)
            if rescued is not None:
                log.error("the journal's committed records are kept in %s", rescued)
            self._spill_pending()
            if self.on_fatal is not None:
                self.on_fatal()
            return False
        except StoreError as exc:
            self.stats["failed_writes"] += 1
            if self._failing is None:
                log.error(
                    "journal write failed, holding %d item(s) in memory and retrying: %s",
                    len(self._pending), exc,
                )
            else:
                log.debug("journal still failing (%d held): %s", len(self._pending), exc)
            self._failing = str(exc)
            return False
        for _ in range(n):
            self._pending.popleft()
        self.committed.fire()
        self._oldest = loop.time() if self._pending else None
        self._retry.reset()
        if self._failing is not None:
            log.info("journal writable again (%s); %d item(s) still to store",
                     self._failing, len(self._pending))
            self._failing = None
        for key in ("inserted", "duplicates", "quarantined"):
            self.stats[key] += int(getattr(stats, key, 0))
        if getattr(stats, "conflicts", 0):
            log.warning("%d re-sent record(s) differ from the stored ones; kept in the "
                        "journal's conflicts table (leakfleet alarms list)", stats.conflicts)
            for station in sorted(set(stats.conflict_stations)):
                n = stats.conflict_stations.count(station)
                metrics.kept_aside(station, "conflict", n)
                # a status event, journalled with the next batch: the journal says it too
                self._pending.append(StationStatus(
                    station, utcnow(), StationState.ONLINE,
                    f"conflict: {n} re-sent record(s) differ from the stored ones (kept in "
                    "the conflicts table)"))
        for (station, kind), count in stored.items():
            m = metrics.for_station(station)
            (m.rejected if kind == "rejected" else m.stored[kind]).inc(count)
        return True

    def _spill_pending(self) -> None:
        """What could not be committed goes to the spill file beside the journal (taken back
        at the next start); the loss of anything that cannot be spilled is logged as such."""
        if not self._pending or self.journal_path is None:
            return
        try:
            n, path = spill(self.journal_path, list(self._pending))
        except OSError as exc:
            log.error("%d record(s) could not be stored nor spilled (%s): they are lost",
                      len(self._pending), exc.strerror or exc)
            return
        self.spilled += n
        log.error("%d record(s) not stored are kept in %s and stored at the next start", n,
                  path)
        self._pending.clear()

    async def _close_journal(self) -> None:
        loop = asyncio.get_running_loop()
        if self._journal is not None:
            journal, self._journal = self._journal, None
            with contextlib.suppress(StoreError, sqlite3.Error):
                await loop.run_in_executor(self._executor, journal.close)
        self._executor.shutdown(wait=False)


_KIND: dict[type, str] = {
    TestResult: "result", CalibrationEvent: "calibration", StationStatus: "status",
    Rejected: "rejected",
}
Tally = dict[tuple[str, str], int]  # (station, kind) -> count


def _tally(items: Sequence[Item]) -> Tally:
    out: Tally = {}
    for item in items:
        kind = _KIND.get(type(item))
        if kind is None:
            continue  # gaps and traces: journalled, not counted per station here
        key = (item.station, kind)
        out[key] = out.get(key, 0) + 1
    return out


def _write_counted(journal: Any, batch: Sequence[Item]) -> tuple[Any, Tally]:
    """``journal.write(batch)`` plus what it newly stored per (station, kind); journal thread.

    A batch without repeats (the usual case) is tallied as it is. When the journal ignored
    repeats (a ring re-read after a restart, a station sending its last result again), the
    new rows are the ones with a seq above the pre-write maximum (this is the only writer), so
    they are read back to attribute them; quarantine repeats (a retried identical rejection)
    are attributed in batch order.
    """
    batch_tally = _tally(batch)
    kinds = {kind for _, kind in batch_tally if kind != "rejected"}
    max_seq = getattr(journal, "max_seq", None)
    before = {k: max_seq(k) for k in kinds} if callable(max_seq) else None
    stats = journal.write(batch)
    if int(getattr(stats, "duplicates", 0)) == 0:
        return stats, batch_tally
    stored: Tally = {}
    if before is not None:
        try:
            for kind in kinds:
                limit = sum(n for (_, k), n in batch_tally.items() if k == kind)
                for _, record in journal.read_after(kind, before[kind], limit):
                    key = (record.station, kind)
                    stored[key] = stored.get(key, 0) + 1
        except StoreError as exc:  # committed already: only the per-station metric is lost
            log.debug("cannot attribute stored records to stations: %s", exc)
    left = int(getattr(stats, "quarantined", 0))
    for item in batch:
        if left <= 0:
            break
        if type(item) is Rejected:
            key = (item.station, "rejected")
            stored[key] = stored.get(key, 0) + 1
            left -= 1
    return stats, stored


# -- stations ---------------------------------------------------------------------------------
def resume_points(journal: Any, store_url: str) -> dict[str, int]:
    """Per station, the cycle of the newest journalled result.

    Modbus polling re-reads the whole ring on start (repeats are ignored by the journal's
    unique keys), so this only lets it tell a real gap from a restart.
    """
    last_cycles = getattr(journal, "last_cycles", None)
    if callable(last_cycles):
        return {str(k): int(v) for k, v in last_cycles().items()}
    try:
        from gateway.store import open_store

        frame = open_store(store_url).latest_results_per_station()
    except (ImportError, AttributeError, StoreError, ValueError) as exc:
        log.debug("no resume points from the journal: %s", exc)
        return {}
    if frame is None or "station" not in frame or "cycle" not in frame:
        return {}
    return {str(s): int(c) for s, c in zip(frame["station"], frame["cycle"], strict=True)}


def build_targets(config: GatewayConfig, resume: Mapping[str, int]) -> list[StationTarget]:
    from gateway.profiles import StationContext

    targets = []
    for st in config.stations:
        ctx = StationContext(
            station=st.id, line=st.line, timezone=st.timezone, programs=dict(st.programs),
            # the plant's parameters for values the station does not send
            program_params=dict(st.program_params),
            address=st.overrides.get("address"),
            traces=st.traces,
        )
        targets.append(
            StationTarget(
                station=st.id,
                endpoint=st.endpoint,
                profile=st.profile,
                context=ctx,
                poll_interval_s=st.poll_interval_s,
                timeout_s=st.timeout_s,
                timeout_explicit=st.timeout_explicit,
                resume_cycle=resume.get(st.id),
                options=dict(st.overrides),
            )
        )
    return targets


def _buses(targets: Sequence[StationTarget]) -> dict[str, list[StationTarget]]:
    """Stations grouped by the wire they share (an RS-485 line, a TCP endpoint)."""
    buses: dict[str, list[StationTarget]] = {}
    for t in targets:
        buses.setdefault(t.endpoint, []).append(t)
    return buses


class _FlaggingOutbox:
    """Passes items to the writer, counting them and noting a station clock that jumps back."""

    def __init__(self, writer: JournalWriter, health: Mapping[str, Any]) -> None:
        self._writer = writer
        self._health = health
        self._clock = ClockWatch()
        self._metrics = {station: metrics.for_station(station) for station in health}
        self._garbage = GarbageLimiter()

    @property
    def accepting(self) -> bool:
        return self._writer.accepting

    async def put(self, items: Sequence[Item]) -> None:
        notes: list[Item] = []
        kept: list[Item] = []
        now = utcnow()
        for item in items:
            self._count(item)
            if isinstance(item, Rejected):
                keep, closed = self._garbage.admit(item, now)
                notes.extend(closed)
                if not keep:
                    continue
            kept.append(item)
            if isinstance(item, TestResult):
                note = self._clock.check(item.station, item.cycle, item.ended_at,
                                         item.received_at)
                if note is not None:
                    log.warning("%s: %s", item.station, note)
                    h = self._health.get(item.station)
                    state = getattr(h, "state", None) or StationState.ONLINE
                    status = StationStatus(item.station, utcnow(), state, note)
                    self._count(status)
                    notes.append(status)
        for summary in [n for n in notes if isinstance(n, Rejected)]:
            h = self._health.get(summary.station)
            state = getattr(h, "state", None) or StationState.ONLINE
            notes.append(StationStatus(summary.station, now, state, summary.reason))
        await self._writer.put([*kept, *notes] if notes else kept)

    async def flush_garbage(self) -> None:
        """At shutdown: the counts of inputs not kept in the open windows, on record."""
        rows = self._garbage.flush(utcnow())
        if rows:
            await self._writer.put(rows)

    def _count(self, item: Item) -> None:
        m = self._metrics.get(item.station)
        if m is None:
            m = self._metrics[item.station] = metrics.for_station(item.station)
        kind = _KIND.get(type(item))
        if kind is not None:
            m.received[kind].inc()
        if isinstance(item, StationStatus):
            m.state(item.state)


def _bus_runner(
    stations: list[StationTarget], outbox: Outbox, pacing: Pacing, phase: float = 0.0
) -> Callable[[], Awaitable[None]]:
    from gateway.drivers.modbus import run_modbus_bus
    from gateway.drivers.serial import run_request_bus, run_stream_station

    first = stations[0]
    if first.profile.transport == "modbus":
        return lambda: run_modbus_bus(stations, outbox, pacing, phase=phase)
    assert first.profile.serial is not None
    if first.profile.serial.mode == "stream":
        return lambda: run_stream_station(first, outbox, pacing)

    # several stations share a line only when their queries name addresses (config checks)
    return lambda: run_request_bus(stations, outbox, pacing)


async def _supervise(
    name: str, stations: list[StationTarget], run: Callable[[], Awaitable[None]],
    outbox: Outbox, pacing: Pacing,
) -> None:
    """Keep a bus task alive: a bug in one bus is logged and retried, never fatal to the rest."""
    backoff = Backoff(pacing.backoff_initial_s, pacing.backoff_max_s)
    while True:
        try:
            await run()
            return
        except Exception as exc:  # the boundary that keeps one station's bug local
            log.exception("bus %s crashed; restarting it", name)
            statuses: list[Item] = []
            for t in stations:
                s = t.health.failed(f"internal error: {exc!r}", state=StationState.FAULT)
                if s is not None:
                    statuses.append(s)
            await outbox.put(statuses)
        await asyncio.sleep(backoff.next())


# -- the runtime ------------------------------------------------------------------------------
@dataclass
class Runtime:
    """A configured gateway, ready to ``run`` until ``stop`` is set."""

    config: GatewayConfig
    writer: JournalWriter | None = None
    targets: list[StationTarget] = field(default_factory=list)
    forwarders: list[Forwarder] = field(default_factory=list)
    metrics_server: metrics.MetricsServer | None = None  # while running with metrics on

    async def run(self, stop: asyncio.Event) -> None:
        self.forwarders = build_forwarders(self.config)  # sink mistakes stop us before anything
        self.metrics_server = _serve_metrics(self.config)
        try:
            await self._run(stop)
        finally:
            server, self.metrics_server = self.metrics_server, None
            if server is not None:
                await asyncio.to_thread(server.close)  # waits for its serving thread

    async def _run(self, stop: asyncio.Event) -> None:
        cfg = self.config
        from gateway.store import open_journal

        if self.writer is None:
            self.writer = JournalWriter(
                lambda: open_journal(cfg.store),
                batch_size=cfg.runtime.batch_size,
                max_delay_s=cfg.runtime.max_delay_s,
                queue_size=cfg.runtime.queue_size,
                max_pending=cfg.runtime.max_pending,
            )
        writer = self.writer
        from gateway.store._sqlite import sqlite_path

        path = Path(sqlite_path(cfg.store))
        writer.journal_path = path
        writer.on_fatal = stop.set
        lock = JournalLock(path)
        lock.acquire()
        try:
            await self._run_locked(stop, writer, path)
        finally:
            lock.release()

    async def _run_locked(self, stop: asyncio.Event, writer: JournalWriter, path: Path) -> None:
        cfg = self.config
        journal = await writer.open()
        if journal is not None:
            back = await writer.call(take_back, path)
            if back:
                log.info("stored %d record(s) an earlier run had spilled", back)
        resume = await writer.call(resume_points, cfg.store) if journal is not None else {}
        self.targets = build_targets(cfg, resume)
        pacing = cfg.runtime.pacing
        log.info(
            "gateway %s (%s): %d station(s) on %d bus(es), journal %s",
            cfg.gateway_id, cfg.site, len(self.targets), len(_buses(self.targets)), cfg.store,
        )
        async with asyncio.TaskGroup() as tg:
            writer_task = tg.create_task(writer.run(), name="journal writer")
            sink_stop = asyncio.Event()
            if cfg.runtime.retention_s is not None or cfg.runtime.trace_retention_s is not None:
                by_kind: dict[str, list[str]] = {
                    kind: [f.name for f in self.forwarders if kind in _kinds_of(f)]
                    for kind in KINDS}
                prune_task = tg.create_task(
                    _prune_forever(writer, cfg.runtime.retention_s, by_kind,
                                   cfg.runtime.trace_retention_s),
                    name="journal retention",
                )  # fmt: skip
            else:
                prune_task = None
            cap_task = tg.create_task(_cap_quarantine_forever(writer), name="quarantine bound")
            alarm_task = tg.create_task(
                _alarms_forever(cfg.store, [f.name for f in self.forwarders], cfg.source),
                name="alarm rules",
            )
            for fwd in self.forwarders:
                if isinstance(fwd, Attachable):
                    fwd.attach(writer.committed, writer.save_cursor)
                tg.create_task(self._forward(fwd, sink_stop), name=f"sink {fwd.name}")
            outbox = _FlaggingOutbox(writer, {t.station: t.health for t in self.targets})
            buses = _buses(self.targets)
            # polled buses start spread over their interval, not all in the same instant
            bus_tasks = [
                tg.create_task(
                    _supervise(ep, group, _bus_runner(group, outbox, pacing, i / len(buses)),
                               outbox, pacing),
                    name=f"bus {ep}",
                )
                for i, (ep, group) in enumerate(buses.items())
            ]
            await stop.wait()
            log.info("stopping: %d item(s) waiting for the journal", writer.pending)
            await _cancel_all(bus_tasks)
            await outbox.flush_garbage()
            at = utcnow()
            await outbox.put([
                StationStatus(station=t.station, at=at, state=StationState.OFFLINE,
                              detail="gateway stopped")
                for t in self.targets
            ])
            if prune_task is not None:
                prune_task.cancel()
            alarm_task.cancel()
            cap_task.cancel()
            await writer.close()
            await writer_task
            sink_stop.set()
        log.info("stopped: %s", ", ".join(f"{k} {v}" for k, v in writer.stats.items()))

    async def _forward(self, fwd: Forwarder, stop: asyncio.Event) -> None:
        try:
            await fwd.run(self.config.store, stop)
        except Exception:  # a sink that fails to run is disabled, the gateway keeps going
            log.exception("sink %s failed and is disabled", fwd.name)


PRUNE_INTERVAL_S = 3600.0


def _kinds_of(forwarder: Any) -> tuple[str, ...]:
    """The record kinds a sink forwards (every kind when it does not say)."""
    client = getattr(forwarder, "client", None)
    return tuple(getattr(client, "kinds", KINDS))


async def _prune_forever(writer: JournalWriter, retention_s: float | None,
                         sinks: Mapping[str, Sequence[str]],
                         trace_retention_s: float | None = None) -> None:
    """Hourly: drop journal rows older than the retention that every enabled sink forwarding
    them confirmed (on the writer's thread, between batches); pressure curves older than
    their own, shorter retention. A failure is logged and tried again later."""
    while True:
        now = utcnow()
        cutoff = now - timedelta(seconds=retention_s) if retention_s is not None else None
        curves = ({"trace": now - timedelta(seconds=trace_retention_s)}
                  if trace_retention_s is not None else None)
        try:
            n = await writer.call(lambda j, c=cutoff, k=curves: j.prune(c, sinks, kind_cutoffs=k))
        except StoreError as exc:
            log.warning("journal retention: pruning failed, will retry: %s", exc)
        except Exception:  # a bug here must not stop collection: like a sink, it is disabled
            log.exception("journal retention failed and is disabled; the journal keeps all")
            return
        else:
            if n:
                log.info("journal retention: removed %d row(s) older than %s", n,
                         (cutoff or now).isoformat(timespec="seconds"))  # fmt: skip
        await asyncio.sleep(PRUNE_INTERVAL_S)


async def _cap_quarantine_forever(writer: JournalWriter) -> None:
    """Hourly: keep the quarantine within its bound (its share of the disk), on record."""
    while True:
        try:
            removed = await writer.call(cap_quarantine)
        except StoreError as exc:
            log.warning("quarantine bound: not applied, will retry: %s", exc)
        else:
            if removed:
                log.warning("quarantine bound: removed the %d oldest rows", removed)
        await asyncio.sleep(PRUNE_INTERVAL_S)


#: seconds between alarm evaluations (gateway.alarm_eval.INTERVAL_S, not imported: that module
#: brings pandas, which the gateway itself never needs)
INTERVAL_S = 30.0


async def _alarms_forever(store_url: str, sinks: list[str], config: str = "") -> None:
    """Keep ``leakfleet alarms watch`` running beside the gateway: the alarm rules evaluated
    every 30 s with their states in the journal. A process of its own, so pandas and scipy
    never weigh on the gateway's memory; it is restarted (with backoff) if it dies, and
    stopped with the gateway."""
    import sys

    from gateway.config import SHIPPED

    # the config's [alarms] thresholds and leak-standard register, when it is a file
    with_config = ["--config", config] if config in SHIPPED or Path(config).is_file() else []
    backoff = 5.0
    await asyncio.sleep(INTERVAL_S)  # nothing to judge in the first seconds of a run
    while True:
        proc = await asyncio.create_subprocess_exec(
            sys.executable, "-m", "gateway", "alarms", "--store", store_url, *with_config,
            "watch",
            "--interval", str(INTERVAL_S), "--sinks", ",".join(sinks),
            stdin=asyncio.subprocess.DEVNULL,
        )
        try:
            rc = await proc.wait()
        except asyncio.CancelledError:
            if proc.returncode is None:
                proc.terminate()
                try:
                    async with asyncio.timeout(10):
                        await proc.wait()
                except TimeoutError:
                    proc.kill()
                    await proc.wait()
            raise
        log.warning("alarm rules: the evaluator stopped (exit %s); restarting in %.0f s",
                    rc, backoff)
        await asyncio.sleep(backoff)
        backoff = min(backoff * 2, 300.0)


def _serve_metrics(config: GatewayConfig) -> metrics.MetricsServer | None:
    """Start the Prometheus endpoint if configured; a port we cannot take is the user's to fix."""
    mc = config.metrics
    if not mc.enabled:
        return None
    try:
        return metrics.serve(mc.prometheus_port, mc.bind)
    except OSError as exc:
        raise ConfigError(
            f"{config.source}: metrics.prometheus_port: cannot listen on "
            f"{mc.bind}:{mc.prometheus_port} ({exc.strerror or exc}); expected a free port"
        ) from None


async def _cancel_all(tasks: Sequence[asyncio.Task[None]]) -> None:
    """Cancel until done: a library's ``wait_for`` (3.11) may swallow a cancellation that
    races with a completed read, so one ``cancel()`` is not always enough."""
    pending = {t for t in tasks if not t.done()}
    while pending:
        for task in pending:
            task.cancel()
        _, pending = await asyncio.wait(pending, timeout=0.5)
    for task in tasks:
        if not task.cancelled() and task.exception() is not None:
            log.error("bus task %s ended with %r", task.get_name(), task.exception())


def run_gateway(config: GatewayConfig) -> int:
    """Run until SIGTERM/SIGINT; returns the process exit code."""

    runtime = Runtime(config)

    async def main() -> None:
        stop = asyncio.Event()
        loop = asyncio.get_running_loop()
        for sig in (signal.SIGTERM, signal.SIGINT):
            with contextlib.suppress(NotImplementedError, RuntimeError):
                loop.add_signal_handler(sig, stop.set)
        await runtime.run(stop)

    started = time.monotonic()
    asyncio.run(main())  # Runtime.run serves the metrics endpoint when configured
    log.debug("ran %.1f s", time.monotonic() - started)
    writer = runtime.writer
    if writer is not None and writer.fatal is not None:
        # a supervisor with restart-on-failure must see this: exit non-zero
        log.error("stopped: %s%s", writer.fatal,
                  f"; {writer.spilled} record(s) spilled" if writer.spilled else "")
        return 1
    return 0

