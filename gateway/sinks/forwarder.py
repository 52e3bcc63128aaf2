"""Store-and-forward: the loop every sink shares, between the journal and one remote system.

What this seam hides. A forwarder knows the journal and a cursor; a ``SinkClient`` knows one
remote system (an MQTT broker, an InfluxDB) and nothing about the journal. The forwarder:

1. opens its own connection to the journal (``open_journal(store_url)``) and reads its persisted
   cursor per kind (``get_cursor(name, kind)``; a new sink starts at 0, i.e. sends everything
   still in the journal);
2. connects the client (``connect``), with a timeout;
3. repeatedly reads ``read_after(kind, cursor, batch_size)`` and hands the batch to
   ``client.send(kind, rows)``. ``send`` returns only once the remote side acknowledged every
   record of the batch (MQTT: a PUBACK per message at QoS 1; InfluxDB: HTTP 204). Only then is
   the cursor advanced and persisted (``set_cursor``). A crash between the acknowledgement and
   the cursor write re-sends that batch after restart: delivery is at-least-once, and both sinks
   make a repeat harmless (MQTT payloads carry ``record_id`` to de-duplicate on; an InfluxDB
   point is keyed by its timestamp and tags, so a re-send overwrites itself);
4. on any ``SinkUnavailable`` (broker or database down, refused login, timeout) closes the
   client, waits a capped exponential backoff with full jitter and reconnects; the journal keeps
   the records meanwhile, so an outage delays data and never loses it. The first failure of a
   streak is logged at ERROR (once), repeats at DEBUG, the recovery at INFO;
5. when ``stop`` is set, makes one last bounded pass (``drain_timeout_s``) if it is connected,
   then closes the client (an MQTT client publishes its retained "offline" state).

The backlog (records not yet acknowledged, and the age of the oldest) is ``Forwarder.backlog``
and, through ``gateway.metrics``, a Prometheus gauge. A ``ConfigError`` from ``connect`` (a
missing secret or certificate file) is not retried: ``run`` raises it and the runtime disables
this sink while the others keep running.
"""

from __future__ import annotations

import asyncio
import contextlib
import logging
import os
import random
import time
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field
from datetime import UTC, datetime
from pathlib import Path
from typing import Any, Protocol

from gateway import metrics
from gateway.aio import Pulse
from gateway.errors import ConfigError, TransportError
from gateway.records import Record
from gateway.sinks import CursorSaver
from gateway.store.journal import KINDS, Journal, Kind, open_journal

__all__ = [
    "Backoff",
    "ForwarderOptions",
    "JournalForwarder",
    "SinkClient",
    "SinkRefused",
    "SinkUnavailable",
    "read_secret",
]

log = logging.getLogger(__name__)

#: kinds that may go out of arrival order (not statuses nor alarm changes: the retained one
#: must be the newest)
LANE_KINDS: tuple[Kind, ...] = ("result", "calibration", "trace")
#: a backlog of more batches than this opens the live lane
LIVE_LANE_BATCHES = 4


class SinkUnavailable(TransportError):
    """The remote system cannot take records right now; retry later (nothing is lost)."""


class SinkRefused(Exception):
    """The remote system answered and will not take these records (retrying cannot help):
    the forwarder isolates the culprit and parks it as a dead letter."""


class SinkClient(Protocol):
    """One remote system. ``send`` returns only after the remote side acknowledged the batch."""

    kinds: tuple[Kind, ...]

    def describe(self) -> str:
        """Where it sends, for log lines (never a secret)."""
        ...

    async def connect(self) -> None: ...

    async def send(self, kind: Kind, rows: Sequence[tuple[int, Record]]) -> None: ...

    async def close(self, *, graceful: bool) -> None: ...


@dataclass
class Backoff:
    """Capped exponential backoff with full jitter (delay uniform in [0, min(cap, base·2^n)])."""

    initial_s: float = 0.5
    cap_s: float = 30.0
    factor: float = 2.0
    attempt: int = 0
    rng: random.Random = field(default_factory=random.Random)

    def next_delay(self) -> float:
        ceiling = min(self.cap_s, self.initial_s * self.factor**self.attempt)
        self.attempt = min(self.attempt + 1, 64)
        # never less than a tenth of the ceiling, so a tight loop cannot hammer a server
        return ceiling * (0.1 + 0.9 * self.rng.random())

    def reset(self) -> None:
        self.attempt = 0


@dataclass(frozen=True)
class ForwarderOptions:
    """Loop settings common to every sink (keys of its ``[sinks.<name>]`` table)."""

    batch_size: int = 500
    poll_interval_s: float = 0.5
    connect_timeout_s: float = 10.0
    send_timeout_s: float = 15.0
    drain_timeout_s: float = 5.0
    backoff_initial_s: float = 0.5
    backoff_max_s: float = 30.0
    backlog_interval_s: float = 5.0

    KEYS = (
        "batch_size", "poll_interval_s", "connect_timeout_s", "send_timeout_s",
        "drain_timeout_s", "backoff_initial_s", "backoff_max_s", "backlog_interval_s",
    )

    @classmethod
    def from_options(cls, options: Mapping[str, Any]) -> ForwarderOptions:
        kwargs: dict[str, Any] = {}
        for key in cls.KEYS:
            if key not in options:
                continue
            value = options[key]
            if isinstance(value, bool) or not isinstance(value, (int, float)) or value <= 0:
                raise ValueError(f"{key} must be a positive number, got {value!r}")
            kwargs[key] = int(value) if key == "batch_size" else float(value)
        return cls(**kwargs)


def read_secret(env_var: str, file_option: str | None, what: str) -> str | None:
    """A secret from ``env_var`` or else a file (first line); never from config or CLI.

    Returns None when neither is set. A named file that cannot be read is a ConfigError (the
    message names the file, never the secret).
    """
    value = os.environ.get(env_var)
    if value:
        return value
    if not file_option:
        return None
    path = Path(file_option).expanduser()
    try:
        text = path.read_text(encoding="utf-8")
    except OSError as exc:
        raise ConfigError(f"{what}: cannot read secrets file {path}: {exc.strerror}") from exc
    secret = text.splitlines()[0].strip() if text.strip() else ""
    if not secret:
        raise ConfigError(f"{what}: secrets file {path} is empty")
    return secret


class JournalForwarder:
    """The runtime's ``Forwarder`` for any ``SinkClient``; see the module docstring."""

    def __init__(
        self,
        name: str,
        client: SinkClient,
        options: ForwarderOptions | None = None,
        *,
        rng: random.Random | None = None,
    ) -> None:
        self.name = name
        self.client = client
        self.options = options or ForwarderOptions()
        self.backoff = Backoff(
            self.options.backoff_initial_s, self.options.backoff_max_s, rng=rng or random.Random()
        )
        self.connected = False
        self.sent: dict[Kind, int] = dict.fromkeys(KINDS, 0)
        self.backlog: dict[Kind, tuple[int, datetime | None]] = {}
        self.last_success: datetime | None = None
        self.last_error: str | None = None
        self.failures = 0  # in the current streak
        self.dead_letters = 0  # records the server refused, parked
        self._cursors: dict[Kind, int] = {}
        # the live lane while a backlog drains: per kind (start, end], records newer than the
        # backlog already sent (the cursor stays the acknowledged prefix, see _send_pending)
        self._lanes: dict[Kind, tuple[int, int]] = {}
        self._backlog_at = 0.0
        # the journal writer's commit signal, set by the runtime: with it a record goes out as
        # soon as it is committed; without it (a journal written by another process) we poll
        self.wake: Pulse | None = None
        self._save_cursor: CursorSaver | None = None

    # -- the runtime's entry point ---------------------------------------------------------
    def attach(self, committed: Pulse, save_cursor: CursorSaver) -> None:
        self.wake, self._save_cursor = committed, save_cursor

    async def run(self, store_url: str, stop: asyncio.Event) -> None:
        journal = await asyncio.to_thread(open_journal, store_url)
        try:
            await self.run_with(journal, stop)
        finally:
            await asyncio.to_thread(journal.close)

    async def run_with(self, journal: Journal, stop: asyncio.Event) -> None:
        """Forward until ``stop``; ``journal`` may be shared (it serialises its own calls)."""
        for kind in self.client.kinds:
            self._cursors[kind] = await asyncio.to_thread(journal.get_cursor, self.name, kind)
        await self._refresh_backlog(journal, force=True)
        log.info("sink %s: forwarding to %s", self.name, self.client.describe())
        while not stop.is_set():
            try:
                async with asyncio.timeout(self.options.connect_timeout_s):
                    await self.client.connect()
                self.connected = True
                metrics.sink_connected(self.name, True)
                await self._pump(journal, stop)
            except SinkUnavailable as exc:
                self._failed(str(exc))
            except TimeoutError:
                self._failed(f"no answer from {self.client.describe()} in time")
            finally:
                await self._close(graceful=stop.is_set())
            if not stop.is_set():
                await self._refresh_backlog(journal)  # the backlog grows most while it is down
                await _sleep_unless(stop, self.backoff.next_delay())
        await self._refresh_backlog(journal, force=True)

    # -- internals -------------------------------------------------------------------------
    async def _pump(self, journal: Journal, stop: asyncio.Event) -> None:
        while True:
            if stop.is_set():
                await self._drain(journal)
                return
            token = self.wake.token() if self.wake is not None else None
            moved = await self._send_pending(journal)
            if self.failures:
                self._recovered()  # healthy only once a pass went through, not on connect
            await self._refresh_backlog(journal)
            if moved:
                continue
            check = getattr(self.client, "check_connection", None)
            if check is not None:  # a client that can tell a lost connection while idle
                check()
            if token is not None:
                await Pulse.wait(token, self.options.poll_interval_s, stop)
            else:
                await _sleep_unless(stop, self.options.poll_interval_s)

    async def _drain(self, journal: Journal) -> None:
        """One last bounded pass at shutdown, so what was journalled last still goes out."""
        try:
            async with asyncio.timeout(self.options.drain_timeout_s):
                while await self._send_pending(journal):
                    pass
        except TimeoutError:
            log.warning("sink %s: stopping with records not yet sent; they stay in the journal "
                        "and go out on the next start", self.name)

    async def _send_pending(self, journal: Journal) -> int:
        """One batch per kind (and one of the live lane's, while a backlog drains); returns
        how many records were acknowledged.

        After an outage the journal holds a backlog in arrival order. Results arriving
        meanwhile would wait behind all of it, so when more than ``LIVE_LANE_BATCHES`` batches
        wait, the newest records go out first in a live lane, one batch a pass beside one
        backlog batch. The persisted cursor stays the acknowledged prefix: the backlog batches
        stop at the lane's start and, once they reach it, the cursor jumps past what the lane
        sent. A crash re-sends the lane's records (at-least-once, as always). Statuses keep
        their order (the retained one must be the newest), so they never take the lane.
        """
        moved = 0
        for kind in self.client.kinds:
            lane = self._lanes.get(kind)
            if lane is None and kind in LANE_KINDS and self.backlog.get(kind, (0, None))[0] > (
                    LIVE_LANE_BATCHES * self.options.batch_size):
                head = await asyncio.to_thread(journal.max_seq, kind)
                lane = self._lanes[kind] = (head, head)
                log.info("sink %s: %s backlog of %d; new records go out first meanwhile",
                         self.name, kind, self.backlog[kind][0])
            if lane is not None:
                live = await asyncio.to_thread(journal.read_after, kind, lane[1],
                                               self.options.batch_size)
                if live:
                    await self._send_rows(journal, kind, live)
                    lane = self._lanes[kind] = (lane[0], live[-1][0])
                    moved += len(live)
            rows = await asyncio.to_thread(
                journal.read_after, kind, self._cursors[kind], self.options.batch_size
            )
            if lane is not None:
                rows = [r for r in rows if r[0] <= lane[0]]
            if rows:
                await self._send_rows(journal, kind, rows)
                moved += len(rows)
            if lane is not None and (self._cursors[kind] >= lane[0] or not rows):
                # the backlog has caught up with the lane: what the lane sent is confirmed
                await self._advance(journal, kind, max(self._cursors[kind], lane[1]))
                del self._lanes[kind]
        return moved

    async def _send_rows(self, journal: Journal, kind: Kind,
                         rows: Sequence[tuple[int, Record]]) -> None:
        t0 = time.monotonic()
        await self._send_isolating(journal, kind, rows)
        if kind not in self._lanes or rows[-1][0] <= self._lanes[kind][0]:
            await self._advance(journal, kind, rows[-1][0])
        self.sent[kind] += len(rows)
        self.last_success = datetime.now(UTC)
        metrics.sink_sent(self.name, kind, len(rows), time.monotonic() - t0)

    async def _advance(self, journal: Journal, kind: Kind, last: int) -> None:
        if self._save_cursor is None or not await self._save_cursor(self.name, kind, last):
            await asyncio.to_thread(journal.set_cursor, self.name, kind, last)
        self._cursors[kind] = last

    async def _send_one(self, kind: Kind, rows: Sequence[tuple[int, Record]]) -> None:
        try:
            async with asyncio.timeout(self.options.send_timeout_s):
                await self.client.send(kind, rows)
        except TimeoutError:
            raise SinkUnavailable(
                f"{self.client.describe()} did not acknowledge {len(rows)} {kind} record(s) "
                f"within {self.options.send_timeout_s:g}s"
            ) from None

    async def _send_isolating(self, journal: Journal, kind: Kind,
                              rows: Sequence[tuple[int, Record]]) -> None:
        """Send ``rows``; when the server refuses the batch, halve it until the refused
        records stand alone, park those as dead letters, and send the rest."""
        try:
            await self._send_one(kind, rows)
            return
        except SinkRefused as exc:
            if len(rows) == 1:
                from gateway.store.deadletters import park

                await asyncio.to_thread(park, journal, self.name, kind, rows, str(exc))
                self.dead_letters += 1
                log.error("sink %s: %s record %s refused, parked as a dead letter: %s",
                          self.name, kind, rows[0][1].record_id, exc)
                return
        half = len(rows) // 2
        await self._send_isolating(journal, kind, rows[:half])
        await self._send_isolating(journal, kind, rows[half:])

    async def _refresh_backlog(self, journal: Journal, *, force: bool = False) -> None:
        now = time.monotonic()
        if not force and now - self._backlog_at < self.options.backlog_interval_s:
            return
        self._backlog_at = now
        self.backlog = await asyncio.to_thread(journal.backlog, self.name)
        at = datetime.now(UTC)
        for kind in self.client.kinds:
            count, oldest = self.backlog.get(kind, (0, None))
            age = (at - oldest).total_seconds() if oldest is not None else 0.0
            metrics.sink_backlog(self.name, kind, count, max(0.0, age))

    async def _close(self, *, graceful: bool) -> None:
        self.connected = False
        metrics.sink_connected(self.name, False)
        try:
            async with asyncio.timeout(self.options.drain_timeout_s):
                await self.client.close(graceful=graceful)
        except (TimeoutError, SinkUnavailable) as exc:
            log.debug("sink %s: close: %s", self.name, exc)

    def _failed(self, message: str) -> None:
        self.failures += 1
        self.last_error = message
        metrics.sink_error(self.name)
        if self.failures == 1:
            log.error("sink %s: %s; retrying with backoff, records wait in the journal",
                      self.name, message)
        else:
            log.debug("sink %s: still failing (%d): %s", self.name, self.failures, message)

    def _recovered(self) -> None:
        self.backoff.reset()
        waiting = sum(n for k, (n, _) in self.backlog.items() if k in self.client.kinds)
        log.info("sink %s: %s takes records again after %d failed attempt(s); "
                 "about %d record(s) were waiting", self.name, self.client.describe(),
                 self.failures, waiting)
        self.failures = 0


async def _sleep_unless(stop: asyncio.Event, seconds: float) -> None:
    with contextlib.suppress(TimeoutError):
        async with asyncio.timeout(seconds):
            await stop.wait()
