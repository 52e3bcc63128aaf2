"""Pressure traces in the journal: packed losslessly, kept once, read back newest first."""

from __future__ import annotations

import random
import sqlite3
from datetime import UTC, datetime, timedelta
from pathlib import Path

from gateway.records import PressureTrace
from gateway.store import open_journal
from gateway.store.traces import prune_traces, traces

T0 = datetime(2026, 12, 3, 8, tzinfo=UTC)


def _trace(cycle: int, role: str = "result", n: int = 2000) -> PressureTrace:
    rng = random.Random(cycle)
    # pressures a few Pa apart at 350 kPa: float32 would round them to 1/32 Pa steps
    p = [350_000.0 - 0.0123 * i + rng.gauss(0, 0.7) for i in range(n)]
    end = T0 + timedelta(minutes=cycle)
    return PressureTrace(station="S1", line="L1", cycle=cycle, ended_at=end, received_at=end,
                         started_at=end - timedelta(seconds=(n - 1) * 0.01),
                         sample_interval_s=0.01, pressures_pa=tuple(p),
                         phases=(("fill", 0.0), ("stabilise", 2.0), ("test", 7.0),
                                 ("end", 19.99)), role=role)


def test_traces_round_trip_exactly_and_compactly(tmp_path: Path) -> None:
    db = tmp_path / "j.db"
    with open_journal(f"sqlite:///{db}") as j:
        stats = j.write([_trace(1), _trace(2), _trace(2), _trace(3, "master")])
        assert (stats.inserted, stats.duplicates) == (3, 1)
        got = traces(j, "S1")
        assert [t.cycle for t in got] == [3, 2, 1]  # newest first
        assert got[2] == _trace(1)  # every sample back bit for bit
        assert [t.cycle for t in traces(j, "S1", role="master")] == [3]
        assert traces(j, "S2") == []
    with sqlite3.connect(db) as c:
        rows, size = c.execute("SELECT COUNT(*), SUM(LENGTH(pressures)) FROM traces").fetchone()
    assert rows == 3 and size < 3 * 2000 * 8  # packed, not one row (or 8 bytes) per sample


def test_traces_may_be_pruned_on_their_own(tmp_path: Path) -> None:
    with open_journal(f"sqlite:///{tmp_path / 'j.db'}") as j:
        j.write([_trace(1), _trace(60)])
        prune_traces(j, T0 + timedelta(minutes=30))
        assert [t.cycle for t in traces(j, "S1")] == [60]
