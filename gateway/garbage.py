"""Bounding the quarantine: a station at the wrong baud rate must not fill the disk.

Per station and minute, the first ``keep`` unreadable inputs are quarantined with their full
raw text (enough to see what is wrong); the rest are only counted. When the minute closes,
one quarantine row records how many were not kept, and a status says "garbage on the line",
so the loss is on record in the journal, never only in a log line. Pure bookkeeping: the
caller passes the time.
"""

from __future__ import annotations

from dataclasses import dataclass, replace
from datetime import datetime

from gateway.records import Rejected

__all__ = ["GarbageLimiter"]


@dataclass
class _Window:
    start: datetime
    kept: int = 0
    dropped: int = 0
    profile: str = ""


class GarbageLimiter:
    def __init__(self, keep: int = 100, window_s: float = 60.0) -> None:
        self.keep = keep
        self.window_s = window_s
        self._windows: dict[str, _Window] = {}

    def admit(self, item: Rejected, now: datetime) -> tuple[bool, list[Rejected]]:
        """(keep this one?, summary rows of windows that closed)."""
        closed = self.close_due(now)
        w = self._windows.get(item.station)
        if w is None:
            w = self._windows[item.station] = _Window(now, profile=item.profile)
        if w.kept < self.keep:
            w.kept += 1
            return True, closed
        w.dropped += 1
        return False, closed

    def close_due(self, now: datetime) -> list[Rejected]:
        out = []
        for station, w in list(self._windows.items()):
            if (now - w.start).total_seconds() >= self.window_s:
                del self._windows[station]
                if w.dropped:
                    out.append(self.summary(station, w, now))
        return out

    def summary(self, station: str, w: _Window, now: datetime) -> Rejected:
        return Rejected(
            station=station, profile=w.profile, raw="",
            reason=(f"garbage on the line: {w.dropped} more unreadable input(s) in "
                    f"{self.window_s:g} s not kept (the first {self.keep} are; wrong line "
                    "settings, a noisy cable or another profile?)"),
            received_at=now,
        )

    def flush(self, now: datetime) -> list[Rejected]:
        """Summaries of every open window (at shutdown)."""
        out = [self.summary(s, w, now) for s, w in self._windows.items() if w.dropped]
        self._windows.clear()
        return [replace(r) for r in out]
