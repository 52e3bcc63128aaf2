"""sim.backfill: a plant history written straight into the journal schema.

The bulk path inserts raw rows and builds the summaries once at the end, so the check that
matters is that the result is the journal a gateway would have built: canonical record ids, and
summaries equal to what the journal's own batch-by-batch upkeep gives for the same records.
"""

from __future__ import annotations

import sqlite3
import subprocess
import sys
from datetime import UTC, datetime
from pathlib import Path

import pytest

from gateway.store import open_journal
from sim.backfill import backfill

REPO = Path(__file__).resolve().parents[2]
END = datetime(2026, 11, 30, 12, tzinfo=UTC)
pytestmark = pytest.mark.timeout(120)


@pytest.fixture(scope="module")
def history(tmp_path_factory: pytest.TempPathFactory) -> Path:
    db = tmp_path_factory.mktemp("bf") / "history.db"
    stats = backfill(f"sqlite:///{db}", 6000, end=END)
    assert stats.results == 6000 and stats.calibrations > 0
    return db


def test_record_ids_are_canonical(history: Path) -> None:
    journal = open_journal(str(history))
    try:
        rows = journal.read_after("result", 0, 500) + journal.read_after("calibration", 0, 50)
        conn = sqlite3.connect(history)
        for seq, rec in rows:
            table = "results" if rec.kind == "result" else "calibrations"
            stored = conn.execute(f"SELECT record_id FROM {table} WHERE seq = ?", (seq,))
            assert stored.fetchone()[0] == rec.record_id
    finally:
        journal.close()


def test_summaries_equal_what_the_journal_keeps(history: Path, tmp_path: Path) -> None:
    # The bulk load's one-pass rebuild against the journal's own batch-by-batch upkeep of the
    # same records (read back from the backfilled journal, written through Journal.write).
    src_journal = open_journal(str(history))
    other = open_journal(str(tmp_path / "batched.db"))
    try:
        after = 0
        while batch := src_journal.read_after("result", after, 500):
            other.write([rec for _, rec in batch])
            after = batch[-1][0]
    finally:
        src_journal.close()
        other.close()
    src = sqlite3.connect(history)
    dst = sqlite3.connect(tmp_path / "batched.db")
    for table in ("result_hours", "parts", "part_hours"):
        a = src.execute(f"SELECT * FROM {table} ORDER BY 1, 2, 3, 4").fetchall()
        b = dst.execute(f"SELECT * FROM {table} ORDER BY 1, 2, 3, 4").fetchall()
        assert a and len(a) == len(b), table
        for x, y in zip(a, b, strict=True):
            if table == "parts":  # seq columns differ between the two journals
                x, y = x[:3] + x[4:9] + x[10:], y[:3] + y[4:9] + y[10:]
            for u, v in zip(x, y, strict=True):  # sums may differ in the last bits by order
                assert u == pytest.approx(v) if isinstance(u, float) else u == v, (table, x, y)


def test_history_looks_like_a_plant(history: Path) -> None:
    conn = sqlite3.connect(history)
    n, stations = conn.execute("SELECT COUNT(*), COUNT(DISTINCT station) FROM results").fetchone()
    assert n == 6000 and stations == 6
    share = dict(conn.execute(
        "SELECT verdict, COUNT(*) * 1.0 / (SELECT COUNT(*) FROM results) FROM results "
        "GROUP BY verdict"
    ).fetchall())
    assert share["pass"] > 0.9 and 0.005 < share["reject"] < 0.1  # common practice: few rejects
    # no tests on Sundays (strftime %w: 0 = Sunday)
    sundays = conn.execute(
        "SELECT COUNT(*) FROM results WHERE strftime('%w', ended_at / 1000000, 'unixepoch') = '0'"
    ).fetchone()[0]
    assert sundays == 0
    last = conn.execute("SELECT MAX(ended_at) FROM results").fetchone()[0] / 1e6
    assert abs(last - END.timestamp()) < 3 * 86400
    retests = conn.execute(
        "SELECT COUNT(*) FROM (SELECT part_id FROM results WHERE part_id IS NOT NULL "
        "GROUP BY part_id HAVING COUNT(*) > 1)"
    ).fetchone()[0]
    assert retests > 0
    ok = conn.execute("PRAGMA integrity_check").fetchone()[0]
    assert ok == "ok"


def test_cli_backfill_and_its_mistakes(tmp_path: Path) -> None:
    db = tmp_path / "cli.db"
    run = subprocess.run(
        [sys.executable, "-m", "gateway", "sim", "backfill", "--results", "300",
         "--store", f"sqlite:///{db}", "--end", "2026-11-30T12:00:00"],
        cwd=REPO, capture_output=True, text=True, timeout=60,
    )  # fmt: skip
    assert run.returncode == 0, run.stderr
    assert "wrote 300 results" in run.stdout
    assert "300/300" in run.stderr  # the progress bar
    bad = subprocess.run(
        [sys.executable, "-m", "gateway", "sim", "backfill", "--results", "10",
         "--store", "influxdb://127.0.0.1:1/x"],
        cwd=REPO, capture_output=True, text=True, timeout=60,
    )  # fmt: skip
    assert bad.returncode == 2
    assert len(bad.stderr.strip().splitlines()) == 1 and "sqlite" in bad.stderr


def test_no_calibration_after_the_history_ends(tmp_path: Path) -> None:
    """A small history is cut from a larger generated chunk: its calibrations are cut with it."""
    db = tmp_path / "small.db"
    backfill(f"sqlite:///{db}", 3000)
    with sqlite3.connect(db) as conn:
        last_result = conn.execute("SELECT MAX(received_at) FROM results").fetchone()[0]
        later = conn.execute("SELECT COUNT(*) FROM calibrations WHERE ended_at > ?",
                             (last_result,)).fetchone()[0]  # fmt: skip
        cals = conn.execute("SELECT COUNT(*) FROM calibrations").fetchone()[0]
    assert later == 0 and cals > 0
