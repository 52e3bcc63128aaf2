"""What every protocol server offers the station runner."""

from __future__ import annotations

import random
from dataclasses import dataclass
from typing import Any, Protocol

from sim.station import Activity

__all__ = ["Endpoint", "StationServer", "TruthSink", "garbage_bytes", "truncate"]


@dataclass(frozen=True, slots=True)
class Endpoint:
    """Where a gateway finds a station: ``tcp`` host:port or a ``tty`` path (a symlink)."""

    station: str
    type: str
    transport: str  # "tcp" or "tty"
    host: str | None = None
    port: int | None = None
    path: str | None = None

    def __str__(self) -> str:
        return f"{self.host}:{self.port}" if self.transport == "tcp" else str(self.path)


class TruthSink(Protocol):
    def record(
        self,
        activity: Activity,
        reported: dict[str, Any],
        resolution: dict[str, float],
        **extra: Any,
    ) -> None: ...

    def garbage(self, station: str, raw: bytes, **extra: Any) -> None: ...


class StationServer(Protocol):
    endpoint: Endpoint

    async def start(self) -> None: ...

    async def serve(self) -> None:
        """Long-running work (answering queries); returns when closed."""

    async def publish(self, activity: Activity) -> None: ...

    async def set_state(self, state: str) -> None: ...

    async def set_link(self, up: bool) -> None: ...

    async def close(self) -> None: ...


_NOISE = bytes(range(0x20, 0x7F)) + bytes(range(0x80, 0x100))


def garbage_bytes(rng: random.Random) -> bytes:
    """Line noise: printable junk with some high bytes, never a line end."""
    return bytes(rng.choice(_NOISE) for _ in range(rng.randint(4, 40)))


def truncate(line: bytes, rng: random.Random) -> bytes:
    """A line cut short, as when a cable glitch swallows its tail."""
    return line[: rng.randint(1, max(1, len(line) - 1))]
