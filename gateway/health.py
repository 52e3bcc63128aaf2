"""Per-station health and reconnect pacing.

``StationHealth`` keeps ``last_success`` / ``last_error`` and turns state changes into
``StationStatus`` records. Logging follows one rule: an error once when a station starts
failing, debug while it keeps failing, info when it recovers, so a dead station does not flood
the log. Every failed exchange and every completed poll round also lands in the station's
Prometheus series (``gateway.metrics``; cheap, served only when configured).

``Backoff`` is capped exponential backoff with jitter ("equal jitter": half the step is fixed,
half random) so a plant of stations that lost the network together does not reconnect in
lock-step.
"""

from __future__ import annotations

import logging
import random
from dataclasses import dataclass, field
from datetime import UTC, datetime
from typing import Any

from gateway import metrics
from gateway.records import StationState, StationStatus

__all__ = ["Backoff", "ClockWatch", "StationHealth"]

log = logging.getLogger(__name__)

_LINK_STATES = frozenset({StationState.ONLINE, StationState.OFFLINE, StationState.FAULT})


class Backoff:
    """Delays of ``initial·2ⁿ`` capped at ``cap``, each drawn from ``[d/2, d]``."""

    def __init__(
        self, initial: float = 0.5, cap: float = 30.0, rng: random.Random | None = None
    ) -> None:
        if initial <= 0 or cap < initial:
            raise ValueError(f"backoff needs 0 < initial <= cap, got {initial}, {cap}")
        self.initial = initial
        self.cap = cap
        self._rng = rng or random.Random()
        self._attempt = 0

    def next(self) -> float:
        step = min(self.cap, self.initial * (2 ** min(self._attempt, 30)))
        self._attempt += 1
        return step / 2 + self._rng.uniform(0, step / 2)

    def reset(self) -> None:
        self._attempt = 0

    @property
    def attempts(self) -> int:
        return self._attempt


def _now() -> datetime:
    return datetime.now(UTC)


@dataclass
class StationHealth:
    """What the gateway knows about one station's link and activity."""

    station: str
    offline_after: int = 1  # consecutive failures before the station counts as offline
    state: StationState | None = None
    last_success: datetime | None = None
    last_error: str | None = None
    last_error_at: datetime | None = None
    failures: int = 0
    counters: dict[str, int] = field(default_factory=dict)
    _metrics: Any = field(init=False, repr=False, compare=False)

    def __post_init__(self) -> None:
        self._metrics = metrics.for_station(self.station)

    def polled(self, seconds: float) -> None:
        """A poll round completed (request to complete answer): its latency for the metrics."""
        self._metrics.poll.observe(max(0.0, seconds))

    def error(self) -> None:
        """A failed exchange that changes no state (a Modbus exception reply): counted only."""
        self._metrics.errors.inc()

    def count(self, what: str, n: int = 1) -> None:
        """Tally events worth a metric (torn reads, exceptions, gaps) without logging each."""
        self.counters[what] = self.counters.get(what, 0) + n

    def succeeded(self, at: datetime | None = None) -> StationStatus | None:
        """An exchange worked; returns a status record when the station came (back) online."""
        at = at or _now()
        self.last_success = at
        recovered = self.failures >= self.offline_after
        if recovered:
            log.info("%s: recovered after %d failed attempt(s); last error: %s",
                     self.station, self.failures, self.last_error)
        self.failures = 0
        if self.state in (None, StationState.OFFLINE, StationState.FAULT):
            return self._set(StationState.ONLINE, "", at)
        return None

    def failed(
        self,
        error: str,
        at: datetime | None = None,
        state: StationState = StationState.OFFLINE,
    ) -> StationStatus | None:
        """An exchange failed; returns a status record on the change into ``state``."""
        at = at or _now()
        error = error.removeprefix(f"{self.station}: ")  # the log line names the station
        self.last_error = error
        self.last_error_at = at
        self.failures += 1
        self._metrics.errors.inc()
        if self.failures < self.offline_after:
            log.debug("%s: %s (tolerated, %d)", self.station, error, self.failures)
            return None
        if self.failures == self.offline_after:
            log.error("%s: %s", self.station, error)
        else:
            log.debug("%s: still failing (%d): %s", self.station, self.failures, error)
        if self.state != state:
            return self._set(state, error, at, quiet=True)  # the error line above said it
        return None

    def observed(
        self, state: StationState, detail: str = "", at: datetime | None = None
    ) -> StationStatus | None:
        """The station reported a process state (idle, testing, ...); a record when it changed."""
        at = at or _now()
        if self.state == state:
            return None
        return self._set(state, detail, at)

    def _set(
        self, state: StationState, detail: str, at: datetime, *, quiet: bool = False
    ) -> StationStatus:
        before = self.state
        self.state = state
        if not quiet:
            # Link changes are what an operator wants to read; process states change every cycle.
            link = state in _LINK_STATES or before in _LINK_STATES
            log.log(
                logging.INFO if link else logging.DEBUG,
                "%s: %s -> %s%s",
                self.station,
                before or "start",
                state,
                f" ({detail})" if detail else "",
            )
        return StationStatus(station=self.station, at=at, state=state, detail=detail[:500])


class ClockWatch:
    """Notices a station clock that jumps, back (daylight saving, a battery swap) or forward
    (someone setting it, a clock that resets to a fixed date).

    Results are stored as the station reported them (its clock is the record's truth, and the
    unique key includes the cycle, so an hour repeated does not collide); the jump itself is
    flagged once, as a status detail, so an analyst knows why times overlap or leap. A jump
    back is a newer cycle ending before the previous one; a jump either way is the station
    clock's offset from the gateway's receive time changing by more than the tolerance (a
    long pause between cycles changes both times alike, so it is no jump).
    """

    def __init__(self, tolerance_s: float = 300.0) -> None:
        self.tolerance_s = tolerance_s
        self._last: dict[str, tuple[int, datetime, float | None]] = {}

    def check(self, station: str, cycle: int, ended_at: datetime,
              received_at: datetime | None = None) -> str | None:
        """A note when the station clock jumped between this cycle and the previous one."""
        last = self._last.get(station)
        if last is not None and cycle <= last[0]:
            return None  # a re-read of an older cycle (after a restart or a torn read)
        skew = (ended_at - received_at).total_seconds() if received_at is not None else None
        self._last[station] = (cycle, ended_at, skew)
        if last is None:
            return None
        back = (last[1] - ended_at).total_seconds()
        if back > self.tolerance_s:
            return (
                f"clock: cycle {cycle} ended at {ended_at.isoformat()}, {back / 60:.0f} min "
                f"before cycle {last[0]} (station clock set back?)"
            )
        if skew is not None and last[2] is not None:
            ahead = skew - last[2]
            if ahead > self.tolerance_s:
                return (
                    f"clock: cycle {cycle} is stamped {ended_at.isoformat()}, "
                    f"{ahead / 60:.0f} min further ahead of the gateway's clock than cycle "
                    f"{last[0]} (station clock set forward?)"
                )
        return None
