"""Importing a station's own history files through its profile into the journal.

Plants keep years of a station's printer or USB log exports. Read through the same profile the
gateway uses live, they become the same canonical records, so the dashboard's history starts
years back. Three promises a long import must keep:

- **idempotent**: the journal keys records by station, cycle and time and ignores true repeats,
  so importing a file twice stores nothing twice;
- **resumable**: progress (bytes done per file, at a chunk boundary) is kept in a small state
  file beside the journal, so an interrupted import of gigabytes goes on where it stopped;
- **nothing dropped silently**: lines the profile cannot read go to the journal's quarantine
  with their reason, as they do live.

Parsing is pure and can run in worker processes (``jobs``); the journal is written by this
process only, in file order.
"""

from __future__ import annotations

import concurrent.futures as cf
import hashlib
import json
import os
from collections import deque
from collections.abc import Callable, Iterator
from dataclasses import dataclass, field, replace
from datetime import UTC, datetime
from pathlib import Path
from typing import Any

from gateway.errors import ConfigError
from gateway.profiles.check import check_text
from gateway.profiles.model import Profile, StationContext
from gateway.records import CalibrationEvent, Rejected, StationStatus, TestResult

__all__ = ["ImportStats", "import_file", "state_path"]

Progress = Callable[[int], None]  # called with bytes done in the file


@dataclass(slots=True)
class ImportStats:
    """What one file's import did."""

    file: str
    lines: int = 0
    results: int = 0
    calibrations: int = 0
    stored: int = 0
    repeats: int = 0
    quarantined: int = 0
    skipped_bytes: int = 0  # already imported by an earlier run (resumed)
    notes: list[str] = field(default_factory=list)

    def to_dict(self) -> dict[str, Any]:
        return {k: getattr(self, k) for k in self.__slots__}


def state_path(journal: Path) -> Path:
    """Where resume points are kept: beside the journal, named after it."""
    return journal.with_name(journal.name + ".imports.json")


def _identity(path: Path) -> str:
    """A file's identity for resuming: its size-independent head (a grown log keeps its
    resume point; a different file under the same name does not inherit one)."""
    with path.open("rb") as fh:
        head = fh.read(65536)
    return hashlib.sha256(head).hexdigest()


def _load_state(file: Path) -> dict[str, Any]:
    try:
        doc = json.loads(file.read_text(encoding="utf-8"))
    except FileNotFoundError:
        return {}
    except (OSError, ValueError) as exc:
        raise ConfigError(f"{file}: unreadable import state ({exc}); delete it to start over "
                          "(a re-import stores nothing twice)") from None
    return doc if isinstance(doc, dict) else {}


def _save_state(file: Path, state: dict[str, Any]) -> None:
    tmp = file.with_name(file.name + ".tmp")
    tmp.write_text(json.dumps(state, indent=1, sort_keys=True), encoding="utf-8")
    os.replace(tmp, file)


def _chunks(path: Path, start: int, first_line: int, lines_per_chunk: int, whole: bool
            ) -> Iterator[tuple[int, int, bytes]]:
    """(first line number, end offset, bytes) pieces that end on a line boundary."""
    with path.open("rb") as fh:
        fh.seek(start)
        if whole:
            data = fh.read()
            yield first_line, start + len(data), data
            return
        line_no = first_line
        buf: list[bytes] = []
        offset = start
        for line in fh:
            buf.append(line)
            offset += len(line)
            if len(buf) >= lines_per_chunk:
                yield line_no, offset, b"".join(buf)
                line_no += len(buf)
                buf = []
        if buf:
            yield line_no, offset, b"".join(buf)


def parse_chunk(profile: Profile, ctx: StationContext, data: bytes, first_line: int,
                received_at: datetime) -> list[Any]:
    """Records and rejections of one chunk, line numbers counted in the whole file (pure)."""
    out: list[Any] = []
    for entry in check_text(profile, data, ctx, received_at):
        item = entry.item
        if item is None:
            continue
        if isinstance(item, Rejected):
            item = replace(item, line_no=(item.line_no or entry.line_no) + first_line - 1)
        out.append(item)
    return out


def import_file(
    path: Path,
    *,
    profile: Profile,
    ctx: StationContext,
    journal: Any,
    state_file: Path,
    lines_per_chunk: int = 20_000,
    jobs: int = 1,
    restart: bool = False,
    progress: Progress | None = None,
) -> ImportStats:
    """Import one history file; returns what it did. Raises ConfigError when the profile
    cannot date history (a station with no clock would get today's time on every record)."""
    if profile.serial is None:
        raise ConfigError(f"profile {profile.name} reads registers, not text: import reads "
                          "a station's text log files (use a serial-type profile)")
    stats = ImportStats(file=str(path))
    size = path.stat().st_size
    key = str(path.resolve())
    state = _load_state(state_file)
    ident = _identity(path)
    entry = state.get(key) if not restart else None
    start, first_line = 0, 1
    if isinstance(entry, dict) and entry.get("identity") == ident:
        start = min(int(entry.get("done", 0)), size)
        first_line = int(entry.get("line", 1))
        stats.skipped_bytes = start
        if start:
            stats.notes.append(f"resumed at byte {start} of {size} (earlier run)")
    whole = profile.serial.mode != "stream"
    # the file's own time, not the import's: a re-import then quarantines a bad line under
    # the same identity (nothing twice), and "received" says when the station wrote it
    received_at = datetime.fromtimestamp(path.stat().st_mtime, UTC)
    pool = cf.ProcessPoolExecutor(max_workers=jobs) if jobs > 1 else None
    pending: deque[tuple[int, int, int, Any]] = deque()
    try:
        for first, end, data in _chunks(path, start, first_line, lines_per_chunk, whole):
            lines = data.count(b"\n")
            if pool is None:
                _store(parse_chunk(profile, ctx, data, first, received_at), journal, stats)
                stats.lines += lines
                _mark(state, state_file, key, ident, end, first + lines, progress)
                continue
            pending.append((end, first + lines, lines,
                            pool.submit(parse_chunk, profile, ctx, data, first, received_at)))
            while len(pending) >= 2 * jobs:
                _drain(pending.popleft(), journal, stats, state, state_file, key, ident,
                       progress)
        while pending:
            _drain(pending.popleft(), journal, stats, state, state_file, key, ident, progress)
    finally:
        if pool is not None:
            pool.shutdown(cancel_futures=True)
    return stats


def _drain(item: tuple[int, int, int, Any], journal: Any, stats: ImportStats,
           state: dict[str, Any], state_file: Path, key: str, ident: str,
           progress: Progress | None) -> None:
    end, next_line, lines, future = item
    _store(future.result(), journal, stats)
    stats.lines += lines
    _mark(state, state_file, key, ident, end, next_line, progress)


def _mark(state: dict[str, Any], state_file: Path, key: str, ident: str, end: int,
          next_line: int, progress: Progress | None) -> None:
    state[key] = {"identity": ident, "done": end, "line": next_line}
    _save_state(state_file, state)
    if progress is not None:
        progress(end)


def _store(items: list[Any], journal: Any, stats: ImportStats) -> None:
    for item in items:
        if isinstance(item, TestResult | CalibrationEvent) and item.time_source == "gateway":
            raise ConfigError(
                f"profile {item.profile} gives these records no station time, so every "
                "imported record would carry today's date: history needs a profile that "
                "reads the time from the file"
            )
        if isinstance(item, TestResult):
            stats.results += 1
        elif isinstance(item, CalibrationEvent):
            stats.calibrations += 1
    batch = [i for i in items if isinstance(i, TestResult | CalibrationEvent | StationStatus
                                            | Rejected)]
    if batch:
        written = journal.write(batch)
        stats.stored += written.inserted
        stats.repeats += written.duplicates
        stats.quarantined += written.quarantined
