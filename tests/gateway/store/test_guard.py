"""The journal's surroundings: one gateway per journal, a journal file deleted under the
gateway, and records that could not be stored kept in a spill file for the next start."""

from __future__ import annotations

import asyncio
from datetime import UTC, datetime, timedelta
from pathlib import Path

import pytest

from gateway.errors import ConfigError
from gateway.records import TestResult
from gateway.runtime import JournalWriter
from gateway.store import open_journal
from gateway.store.guard import JournalLock, spill_path, take_back

T0 = datetime(2026, 12, 3, 8, tzinfo=UTC)


def _results(first: int, n: int) -> list[TestResult]:
    return [TestResult(station="S1", line="L1", cycle=c, ended_at=T0 + timedelta(seconds=c),
                       received_at=T0, verdict="pass", program="P")
            for c in range(first, first + n)]


def test_a_second_gateway_is_refused_and_told_who_holds_the_journal(tmp_path: Path) -> None:
    db = tmp_path / "j.db"
    with JournalLock(db), pytest.raises(ConfigError, match=r"in use by gateway pid \d+ on "):
        JournalLock(db).acquire()
    with JournalLock(db):  # released on exit: free again
        pass


async def test_a_deleted_journal_stops_the_writer_and_keeps_everything(tmp_path: Path) -> None:
    db = tmp_path / "j.db"
    writer = JournalWriter(lambda: open_journal(f"sqlite:///{db}"))
    writer.journal_path = db
    stopped = asyncio.Event()
    writer.on_fatal = stopped.set
    await writer.open()
    task = asyncio.create_task(writer.run())
    await writer.put(_results(1, 5))
    for _ in range(100):
        if writer.stats["inserted"] >= 5:
            break
        await asyncio.sleep(0.02)
    assert writer.stats["inserted"] == 5
    db.unlink()  # under the running gateway
    await writer.put(_results(6, 3))
    await asyncio.wait_for(stopped.wait(), 10)
    await asyncio.wait_for(task, 10)
    assert writer.fatal is not None and "deleted or replaced" in writer.fatal
    # the committed five survive in a rescued copy, the three in flight in the spill file
    rescued = list(tmp_path.glob("j.db.rescued-*.db"))
    assert len(rescued) == 1
    with open_journal(f"sqlite:///{rescued[0]}") as j:
        assert j.max_seq("result") == 5
    assert spill_path(db).exists()
    # the next start on a fresh journal takes the spilled records back, once
    with open_journal(f"sqlite:///{db}") as j:
        assert take_back(j, db) == 3
        assert not spill_path(db).exists()
        assert take_back(j, db) == 0
        assert [c for (c,) in j._query("SELECT cycle FROM results ORDER BY cycle", (), "")] == [
            6, 7, 8]
