"""The truth log: every record a station emitted (as reported, plus the true leak), and every
garbage or truncated line it put on a wire. JSON lines, flushed one by one."""

from __future__ import annotations

import json
from datetime import UTC, datetime
from pathlib import Path
from typing import IO, Any

from sim.station import Activity, SimCalibration, SimResult

__all__ = ["TruthLog"]


class TruthLog:
    """Writes entries to a file (optional) and keeps them in memory for tests."""

    def __init__(self, path: Path | None, lines: dict[str, str], keep: bool = True) -> None:
        self.path = path
        self.lines = lines
        self.keep = keep
        self.entries: list[dict[str, Any]] = []
        self._file: IO[str] | None = None
        if path is not None:
            path.parent.mkdir(parents=True, exist_ok=True)
            self._file = path.open("w", encoding="utf-8")
        self._waiters: list[Any] = []

    def _emit(self, entry: dict[str, Any]) -> None:
        if self._file is not None:
            self._file.write(json.dumps(entry, separators=(",", ":"), allow_nan=False) + "\n")
            self._file.flush()
        if self.keep:
            self.entries.append(entry)
        for callback in list(self._waiters):
            callback()

    def on_entry(self, callback: Any) -> None:
        self._waiters.append(callback)

    def off_entry(self, callback: Any) -> None:
        if callback in self._waiters:
            self._waiters.remove(callback)

    def record(
        self,
        activity: Activity,
        reported: dict[str, Any],
        resolution: dict[str, float],
        **extra: Any,
    ) -> None:
        r = activity.record
        entry: dict[str, Any] = {
            "kind": "result" if isinstance(r, SimResult) else "calibration",
            "station": r.station,
            "line": r.line,
            "reported": reported,
            "resolution": resolution,
        }
        if isinstance(r, SimResult):
            entry["true_leak_sccm"] = r.true_leak_sccm
            entry["retest"] = r.retest
            entry["reason"] = r.reason
        else:
            assert isinstance(r, SimCalibration)
            entry["true_leak_sccm"] = 0.0  # the master part does not leak
            entry["standard_serial"] = r.standard_serial
            entry["reason"] = r.reason
        entry["true_ended_at"] = _iso(r.ended_at)
        entry["program_no"] = r.program_no
        entry.update(extra)
        self._emit(entry)

    def garbage(self, station: str, raw: bytes, **extra: Any) -> None:
        entry: dict[str, Any] = {
            "kind": "garbage",
            "station": station,
            "raw": raw.decode("ascii", "replace"),
            "raw_hex": raw.hex(),
        }
        entry.update(extra)
        self._emit(entry)

    def close(self) -> None:
        if self._file is not None:
            self._file.close()
            self._file = None


def _iso(t: datetime) -> str:
    return t.astimezone(UTC).isoformat().replace("+00:00", "Z")
