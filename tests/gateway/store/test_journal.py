"""Journal write side: round trips, idempotence, cursors, retention, migrations, failures."""

from __future__ import annotations

import asyncio
import os
import signal
import sqlite3
import subprocess
import sys
import textwrap
from dataclasses import replace
from datetime import timedelta
from pathlib import Path

import pytest

from gateway.errors import ConfigError, StoreError
from gateway.store import Journal, WriteStats, open_journal
from gateway.store.schema import MIGRATIONS, SCHEMA_VERSION, Migration
from tests.gateway.store._data import T0, calibration, rejected, result, status

pytestmark = pytest.mark.timeout(60)


@pytest.fixture
def journal(tmp_path: Path):
    j = open_journal(f"sqlite:///{tmp_path}/state/journal.db")
    yield j
    j.close()


def test_url_forms(tmp_path: Path) -> None:
    for url in (f"sqlite:///{tmp_path}/a.db", str(tmp_path / "b.db")):
        open_journal(url).close()
    assert (tmp_path / "a.db").exists() and (tmp_path / "b.db").exists()
    for bad in ("postgres://x/y", "sqlite://host/x.db", "sqlite:///x.db?mode=ro", ""):
        with pytest.raises(ConfigError):
            open_journal(bad)


def test_wal_mode_and_schema(journal: Journal) -> None:
    conn = sqlite3.connect(journal.path)
    assert conn.execute("PRAGMA journal_mode").fetchone()[0] == "wal"
    assert conn.execute("SELECT schema_version FROM meta").fetchone()[0] == SCHEMA_VERSION
    cols = [r[1] for r in conn.execute("PRAGMA table_info(results)")]
    assert cols[:3] == ["seq", "record_id", "station"] and "leak_rate_sccm" in cols
    conn.close()


def test_round_trip_every_kind(journal: Journal) -> None:
    full = result(
        1, lower_limit_sccm=-0.5, temperature_c=21.5, calibration_ref="cal-7", reason="",
        raw="1;L1-S1;Ø µ\t", verdict="reject", leak_rate_sccm=2.7,
    )  # fmt: skip
    bare = result(2, part_id=None, raw="", profile="")
    cals = [calibration(0), calibration(5, passed=False, reason="ratio out of band")]
    stats = [status(0, "online"), status(1, "fault", detail="link lost")]
    got = journal.write([full, bare, *cals, *stats])
    assert got == WriteStats(inserted=6, duplicates=0, quarantined=0)
    assert [r for _, r in journal.read_after("result", 0, 10)] == [full, bare]
    assert [r for _, r in journal.read_after("calibration", 0, 10)] == cals
    assert [r for _, r in journal.read_after("status", 0, 10)] == stats
    # microsecond timestamps survive exactly
    odd = result(3, ended_at=T0 + timedelta(microseconds=123_457))
    journal.write([odd])
    assert journal.read_after("result", 2, 1)[0][1] == odd


def test_quarantine_keeps_everything(journal: Journal) -> None:
    bad = rejected(7, raw="\x00\xff bytes as text", reason="verdict code 'Q' unknown")
    assert journal.write([bad, rejected(8, raw="x")]) == WriteStats(0, 0, 2)
    conn = sqlite3.connect(journal.path)
    rows = conn.execute(
        "SELECT station, profile, raw, reason, received_at, line_no FROM quarantine ORDER BY seq"
    ).fetchall()
    conn.close()
    assert rows[0][:4] == (
        "L1-S1",
        "lf-delim@1",
        "\x00\xff bytes as text",
        "verdict code 'Q' unknown",
    )
    assert rows[0][5] == 7 and rows[1][5] == 8
    assert journal.write([rejected(9, line_no=None)]) == WriteStats(0, 0, 1)
    # the very same rejection retried is not quarantined twice
    assert journal.write([bad]) == WriteStats(0, 1, 0)


def test_duplicates_stored_once(journal: Journal) -> None:
    r = result(1)
    assert journal.write([r, r, result(2)]) == WriteStats(inserted=2, duplicates=1)
    assert journal.write([r, result(3)]) == WriteStats(inserted=1, duplicates=1)
    # a re-read of the same cycle with another received_at is still the same record
    again = replace(r, received_at=r.received_at + timedelta(minutes=5))
    assert journal.write([again, calibration(0), calibration(0)]) == WriteStats(1, 2, 0)
    assert [r.cycle for _, r in journal.read_after("result", 0, 10)] == [1, 2, 3]  # type: ignore[union-attr]


def test_clock_jump_back_is_a_new_row(journal: Journal) -> None:
    first = result(41)
    # same station and cycle counter, station clock set back an hour: a different test
    jumped = replace(first, ended_at=first.ended_at - timedelta(hours=1))
    assert journal.write([first, jumped]) == WriteStats(inserted=2, duplicates=0)
    assert len(journal.read_after("result", 0, 10)) == 2


def test_cursors_and_backlog(tmp_path: Path, journal: Journal) -> None:
    assert journal.get_cursor("mqtt", "result") == 0
    assert journal.backlog("mqtt") == {
        "result": (0, None),
        "calibration": (0, None),
        "status": (0, None),
        "trace": (0, None),
        "alarm": (0, None),
    }
    journal.write([result(i) for i in range(1, 6)] + [status(0)])
    seqs = [s for s, _ in journal.read_after("result", 0, 100)]
    assert seqs == sorted(seqs) and len(seqs) == 5
    assert [s for s, _ in journal.read_after("result", seqs[1], 2)] == seqs[2:4]
    journal.set_cursor("mqtt", "result", seqs[2])
    count, oldest = journal.backlog("mqtt")["result"]
    assert count == 2 and oldest == result(4).received_at
    assert journal.backlog("mqtt")["status"] == (1, status(0).at)
    assert journal.backlog("influx")["result"][0] == 5
    journal.close()
    reopened = open_journal(str(journal.path))
    assert reopened.get_cursor("mqtt", "result") == seqs[2]
    reopened.close()
    with pytest.raises(ValueError):
        journal.get_cursor("mqtt", "bogus")  # type: ignore[arg-type]
    with pytest.raises(ValueError):
        reopened.set_cursor("mqtt", "result", -1)


def test_prune_only_what_every_sink_passed(journal: Journal) -> None:
    journal.write([result(i) for i in range(1, 11)] + [rejected(1), rejected(2)])
    seqs = [s for s, _ in journal.read_after("result", 0, 100)]
    journal.set_cursor("mqtt", "result", seqs[7])  # passed 8
    journal.set_cursor("influx", "result", seqs[3])  # passed 4
    cutoff = result(7).received_at  # rows 1..6 are older than this
    # influx only passed 4 → only 1..4 may go; quarantine goes by age (both older)
    assert journal.prune(cutoff, ["mqtt", "influx"]) == 4 + 2
    left = [r.cycle for _, r in journal.read_after("result", 0, 100)]  # type: ignore[union-attr]
    assert left == [5, 6, 7, 8, 9, 10]
    journal.set_cursor("influx", "result", seqs[9])
    assert journal.prune(cutoff, ["mqtt", "influx"]) == 2  # 5, 6: older and passed by both
    # a sink that never confirmed anything blocks pruning entirely
    assert journal.prune(T0 + timedelta(days=1), ["mqtt", "new-sink"]) == 0
    # no sinks listed: age alone
    assert journal.prune(T0 + timedelta(days=1), []) == 4
    assert journal.max_seq("result") == seqs[9]  # seq never reused after a prune


def test_migration_step_runs_once(tmp_path: Path) -> None:
    path = tmp_path / "m.db"
    open_journal(str(path)).close()  # at the current version
    nxt = SCHEMA_VERSION + 1
    v2 = Migration(
        nxt,
        (
            "CREATE TABLE migration_log (step TEXT)",
            "INSERT INTO migration_log VALUES ('v2')",
            "ALTER TABLE results ADD COLUMN operator TEXT",
        ),
    )
    for _ in range(3):
        j = Journal(path, migrations=(*MIGRATIONS, v2))
        assert j.version == nxt
        j.close()
    conn = sqlite3.connect(path)
    assert conn.execute("SELECT COUNT(*) FROM migration_log").fetchone()[0] == 1
    assert conn.execute("SELECT schema_version FROM meta").fetchone()[0] == nxt
    conn.close()
    with pytest.raises(StoreError, match="newer than this build"):
        Journal(path)  # this build refuses a journal from a newer one


def test_failed_migration_leaves_old_version(tmp_path: Path) -> None:
    path = tmp_path / "m.db"
    open_journal(str(path)).close()
    broken = Migration(SCHEMA_VERSION + 1, ("CREATE TABLE half (x)", "THIS IS NOT SQL"))
    with pytest.raises(StoreError):
        Journal(path, migrations=(*MIGRATIONS, broken))
    conn = sqlite3.connect(path)
    assert conn.execute("SELECT schema_version FROM meta").fetchone()[0] == SCHEMA_VERSION
    assert conn.execute("SELECT name FROM sqlite_master WHERE name = 'half'").fetchone() is None
    conn.close()


def test_full_disk_then_recovery(journal: Journal) -> None:
    journal.write([result(i) for i in range(1, 4)])
    conn = journal._conn
    pages = conn.execute("PRAGMA page_count").fetchone()[0]
    conn.execute(f"PRAGMA max_page_count = {pages}")  # no room to grow: SQLITE_FULL
    big = [result(i, raw="x" * 4000) for i in range(100, 400)]
    with pytest.raises(StoreError, match="disk full") as info:
        journal.write(big)
    assert isinstance(info.value.__cause__, sqlite3.Error)
    assert journal.max_seq("result") == 3  # none of the failed batch is stored
    conn.execute("PRAGMA max_page_count = 1073741823")  # space returns
    assert journal.write(big).inserted == 300
    assert conn.execute("PRAGMA integrity_check").fetchone()[0] == "ok"


def test_read_only_journal(journal: Journal) -> None:
    journal.write([result(1)])
    # Tests may run as root, where chmod does not stop writes; query_only makes SQLite
    # answer exactly as for a read-only file (SQLITE_READONLY).
    journal._conn.execute("PRAGMA query_only = ON")
    with pytest.raises(StoreError, match="read-only"):
        journal.write([result(2)])
    with pytest.raises(StoreError, match="read-only"):
        journal.set_cursor("mqtt", "result", 1)
    journal._conn.execute("PRAGMA query_only = OFF")
    assert journal.write([result(2)]).inserted == 1


def test_locked_journal(tmp_path: Path) -> None:
    j = Journal(tmp_path / "l.db", busy_timeout_s=0.05)
    other = sqlite3.connect(tmp_path / "l.db", isolation_level=None)
    other.execute("BEGIN IMMEDIATE")
    with pytest.raises(StoreError, match="locked"):
        j.write([result(1)])
    other.execute("ROLLBACK")
    assert j.write([result(1)]).inserted == 1
    j.close()
    other.close()


def test_not_a_database(tmp_path: Path) -> None:
    path = tmp_path / "junk.db"
    path.write_bytes(b"this is not sqlite" * 100)
    with pytest.raises(StoreError, match="not a SQLite database"):
        open_journal(str(path))


def test_write_from_worker_threads(journal: Journal) -> None:
    async def main() -> list[WriteStats]:
        return [await asyncio.to_thread(journal.write, [result(i)]) for i in range(1, 20)]

    assert sum(s.inserted for s in asyncio.run(main())) == 19


def test_acknowledged_batch_survives_kill_9(tmp_path: Path) -> None:
    path = tmp_path / "k.db"
    child = textwrap.dedent(
        f"""
        import os, signal, sys
        from gateway.store import open_journal
        from tests.gateway.store._data import result
        j = open_journal({str(path)!r})
        for b in range(5):
            j.write([result(b * 100 + i) for i in range(1, 101)])
        print("acked", flush=True)
        os.kill(os.getpid(), signal.SIGKILL)
        """
    )
    root = Path(__file__).resolve().parents[3]
    proc = subprocess.run(
        [sys.executable, "-c", child], cwd=root, capture_output=True, text=True, timeout=30
    )
    assert proc.returncode == -signal.SIGKILL and "acked" in proc.stdout
    assert os.path.exists(f"{path}-wal")  # killed without a checkpoint or clean close
    j = open_journal(str(path))
    assert len(j.read_after("result", 0, 1000)) == 500
    assert j._conn.execute("PRAGMA integrity_check").fetchone()[0] == "ok"
    j.close()
