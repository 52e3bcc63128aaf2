"""What every driver shares: the outbox it delivers to, the station it serves, its errors."""

from __future__ import annotations

import asyncio
from collections.abc import Sequence
from dataclasses import dataclass, field
from datetime import datetime
from typing import TYPE_CHECKING, Any, Protocol

from gateway import clock
from gateway.errors import ProtocolError, TransportError
from gateway.health import Backoff, StationHealth
from gateway.records import (
    CalibrationEvent,
    GapEvent,
    PressureTrace,
    Rejected,
    StationStatus,
    TestResult,
)

if TYPE_CHECKING:
    from gateway.profiles import Profile, StationContext

__all__ = [
    "ExceptionReply",
    "Item",
    "LinkLost",
    "NoAnswer",
    "Outbox",
    "Pacing",
    "StationTarget",
    "utcnow",
]

Item = TestResult | CalibrationEvent | StationStatus | Rejected | GapEvent | PressureTrace


class NoAnswer(TransportError):
    """The station (or the device on a shared bus) did not answer in time; the link may be fine."""


class LinkLost(TransportError):
    """The connection or port itself is gone; it must be reopened."""


class ExceptionReply(ProtocolError):
    """A Modbus exception response (the station is there, but declined this read)."""

    def __init__(self, code: int, what: str) -> None:
        super().__init__(f"{what}: exception response {code:02d}")
        self.code = code


class Outbox(Protocol):
    """Where drivers put what they read; the runtime's journal writer implements it."""

    async def put(self, items: Sequence[Item]) -> None:
        """Hand over items; waits (back-pressure) while the writer holds too much."""

    @property
    def accepting(self) -> bool:
        """False while the journal cannot store: pollers whose stations hold results wait."""


@dataclass(frozen=True)
class Pacing:
    """Reconnect backoff and failure tolerance, from the gateway config."""

    backoff_initial_s: float = 0.5
    backoff_max_s: float = 30.0
    offline_after: int = 3  # consecutive unanswered polls before a polled station is offline
    line_gap_s: float = 0.25  # silence that ends an answer once it has started

    def backoff(self) -> Backoff:
        return Backoff(self.backoff_initial_s, self.backoff_max_s)


@dataclass
class StationTarget:
    """One station as a driver sees it: where, what profile, how often."""

    station: str
    endpoint: str
    profile: Profile
    context: StationContext
    poll_interval_s: float
    timeout_s: float
    health: StationHealth = field(init=False)
    resume_cycle: int | None = None  # newest cycle already journalled (Modbus resume point)
    timeout_explicit: bool = False  # the station config set a timeout: it beats the profile's
    options: dict[str, Any] = field(default_factory=dict)

    def __post_init__(self) -> None:
        self.health = StationHealth(self.station)


def utcnow() -> datetime:
    """The gateway's clock (``gateway.clock``: the wall clock, or a demo plant's)."""
    return clock.utcnow()


async def sleep_for(seconds: float) -> None:
    """A pause between polls or reconnects (a named helper keeps the intent readable)."""
    await asyncio.sleep(max(0.0, seconds))
