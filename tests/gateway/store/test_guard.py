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


def test_the_quarantine_keeps_within_its_bound_on_record(tmp_path: Path) -> None:
    from gateway.records import Rejected
    from gateway.store.guard import cap_quarantine

    with open_journal(f"sqlite:///{tmp_path / 'j.db'}") as j:
        rows = [Rejected(station="S1" if i % 2 else "S2", profile="p", raw=f"junk {i}",
                         reason="noise", received_at=T0 + timedelta(seconds=i))
                for i in range(50)]
        j.write(rows)
        assert cap_quarantine(j, max_rows=20) == 30
        left = j._query("SELECT raw, reason FROM quarantine ORDER BY seq", (), "")
        kept = [raw for raw, _ in left if raw]
        assert kept == [f"junk {i}" for i in range(30, 50)]  # the newest stay
        notes = [why for raw, why in left if not raw]
        assert len(notes) == 2 and all("quarantine bound" in n for n in notes)
        assert cap_quarantine(j, max_rows=100) == 0


async def test_a_conflict_is_a_status_and_a_metric(tmp_path: Path) -> None:
    from dataclasses import replace

    from gateway import metrics

    db = tmp_path / "j.db"
    writer = JournalWriter(lambda: open_journal(f"sqlite:///{db}"))
    await writer.open()
    task = asyncio.create_task(writer.run())
    first = _results(1, 1)[0]
    await writer.put([first])
    await writer.put([replace(first, verdict="reject")])
    for _ in range(200):
        with open_journal(f"sqlite:///{db}") as j:
            details = [d for (d,) in j._query("SELECT detail FROM statuses", (), "")]
        if details:
            break
        await asyncio.sleep(0.02)
    await writer.close()
    await task
    assert any(d.startswith("conflict: 1 re-sent") for d in details)
    text = metrics.exposition().decode()
    assert 'leakfleet_records_kept_aside_total{station="S1",what="conflict"}' in text


async def test_stopping_while_the_disk_is_full_spills_and_fails(tmp_path: Path) -> None:
    """SIGTERM while every write fails (disk full): what is held in memory goes to the spill
    file, the writer says it failed (the gateway then exits non-zero), and nothing is lost."""
    from gateway.errors import StoreError

    class FullDisk:
        def write(self, items: object) -> object:
            raise StoreError("journal j.db: disk full while writing a batch")

        def max_seq(self, kind: str) -> int:
            return 0

        def close(self) -> None:
            pass

    db = tmp_path / "j.db"
    writer = JournalWriter(lambda: FullDisk(), retry_initial_s=0.01, retry_max_s=0.02)
    writer.journal_path = db
    await writer.open()
    task = asyncio.create_task(writer.run(shutdown_grace_s=0.2))
    await writer.put(_results(1, 17))
    await asyncio.sleep(0.1)
    await writer.close()
    await asyncio.wait_for(task, 10)
    assert writer.fatal is not None and writer.spilled == 17
    with open_journal(f"sqlite:///{db}") as j:  # the next start takes them back
        assert take_back(j, db) == 17
