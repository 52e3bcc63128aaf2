"""What keeps a journal safe from its surroundings: one gateway at a time, a file that must
stay the one we opened, and a spill file for what could not be stored.

- ``JournalLock``: an exclusive ``flock`` on ``<journal>.lock``, holding who took it (pid,
  host, time), so a second gateway on the same journal is refused with the holder's name
  instead of both fighting over serial ports and writing contradictory statuses.
- ``JournalGone``: the file at the journal's path is no longer the one opened (deleted or
  renamed under the running gateway). Writing on would go into an unlinked file or leave the
  last commits in a stray WAL, so the gateway stops with this error.
- ``spill`` / ``take_back``: records that could not be committed (journal gone, disk full at
  shutdown) are written as JSON lines beside the journal and stored at the next start.
"""

from __future__ import annotations

import contextlib
import fcntl
import json
import os
import socket
from collections.abc import Iterable
from datetime import UTC, datetime
from pathlib import Path
from typing import Any

from gateway.errors import ConfigError, LeakfleetError

__all__ = [
    "QUARANTINE_MAX_ROWS", "JournalGone", "JournalLock", "cap_quarantine", "spill", "spill_path",
    "take_back",
]


class JournalGone(LeakfleetError):
    """The journal file was deleted or replaced while the gateway ran."""


class JournalLock:
    """Exclusive use of a journal by one gateway (advisory ``flock``, released on exit or
    when the process dies, so a crash never leaves a stale lock)."""

    def __init__(self, journal: Path) -> None:
        self.path = journal.with_name(journal.name + ".lock")
        self._fd: int | None = None

    def acquire(self) -> None:
        self.path.parent.mkdir(parents=True, exist_ok=True)
        fd = os.open(self.path, os.O_RDWR | os.O_CREAT, 0o644)
        try:
            fcntl.flock(fd, fcntl.LOCK_EX | fcntl.LOCK_NB)
        except BlockingIOError:
            holder = os.pread(fd, 400, 0).decode("utf-8", "replace").strip() or "another process"
            os.close(fd)
            raise ConfigError(f"journal {self.path.with_suffix('')} is in use by {holder}; "
                              "stop that gateway first (one gateway per journal)") from None
        os.ftruncate(fd, 0)
        note = (f"gateway pid {os.getpid()} on {socket.gethostname()} since "
                f"{datetime.now(UTC).isoformat(timespec='seconds')}")
        os.pwrite(fd, note.encode(), 0)
        self._fd = fd

    def release(self) -> None:
        if self._fd is not None:
            with contextlib.suppress(OSError):
                os.ftruncate(self._fd, 0)
                fcntl.flock(self._fd, fcntl.LOCK_UN)
            os.close(self._fd)
            self._fd = None

    def __enter__(self) -> JournalLock:
        self.acquire()
        return self

    def __exit__(self, *exc: object) -> None:
        self.release()


def spill_path(journal: Path) -> Path:
    return journal.with_name(journal.name + ".spill.jsonl")


def spill(journal: Path, items: Iterable[Any]) -> tuple[int, Path]:
    """Append records (anything with ``to_dict``) to the spill file; returns (count, path)."""
    path = spill_path(journal)
    n = 0
    with path.open("a", encoding="utf-8") as fh:
        for item in items:
            to_dict = getattr(item, "to_dict", None)
            if callable(to_dict):
                fh.write(json.dumps(to_dict(), default=str) + "\n")
                n += 1
        fh.flush()
        os.fsync(fh.fileno())
    return n, path


def take_back(journal: Any, path: Path) -> int:
    """Store what an earlier run spilled, then remove the spill file. Lines that are not a
    record stay in a ``.bad`` file beside it (never silently dropped)."""
    from gateway.records import Rejected, record_from_dict

    spilled = spill_path(path)
    if not spilled.exists():
        return 0
    records: list[Any] = []
    bad: list[str] = []
    for line in spilled.read_text(encoding="utf-8").splitlines():
        if not line.strip():
            continue
        try:
            doc = json.loads(line)
            if doc.get("kind") == "quarantine":
                doc.pop("schema", None)
                doc.pop("kind", None)
                doc["received_at"] = datetime.fromisoformat(doc["received_at"])
                records.append(Rejected(**doc))
            else:
                records.append(record_from_dict(doc))
        except (ValueError, KeyError, TypeError):
            bad.append(line)
    for i in range(0, len(records), 500):
        journal.write(records[i:i + 500])
    if bad:
        with spilled.with_name(spilled.name + ".bad").open("a", encoding="utf-8") as fh:
            fh.write("\n".join(bad) + "\n")
    spilled.unlink()
    return len(records)


#: quarantine rows kept at most (the rate limit keeps 100 a minute per station with full text;
#: this bounds the table's share of the disk over months of a noisy line)
QUARANTINE_MAX_ROWS = 500_000


def cap_quarantine(journal: Any, max_rows: int = QUARANTINE_MAX_ROWS) -> int:
    """Remove the oldest quarantine rows beyond ``max_rows``; each station whose rows went
    gets one row saying how many, so the removal is on record. Returns rows removed."""
    from gateway.records import Rejected

    (count,) = journal._query("SELECT COUNT(*) FROM quarantine", (), "counting quarantine")[0]
    excess = int(count) - max_rows
    if excess <= 0:
        return 0
    (edge,) = journal._query("SELECT seq FROM quarantine ORDER BY seq LIMIT 1 OFFSET ?",
                             (excess - 1,), "reading quarantine")[0]
    per_station = journal._query("SELECT station, profile, COUNT(*) FROM quarantine "
                                 "WHERE seq <= ? GROUP BY station", (edge,),
                                 "reading quarantine")
    journal._execute_write("DELETE FROM quarantine WHERE seq <= ?", (edge,),
                           "bounding the quarantine")
    now = datetime.now(UTC)
    notes = [Rejected(station=st, profile=prof, raw="", received_at=now,
                      reason=(f"quarantine bound: the {n} oldest unreadable input(s) of this "
                              f"station removed to keep at most {max_rows} rows"))
             for st, prof, n in per_station]
    journal.write(notes)
    return excess
