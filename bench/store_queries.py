"""Dashboard query times on a large synthetic journal (not a test: machine-dependent figures).

Run: python -m bench.store_queries [--results 1000000] [--db PATH] [--keep]; prints JSON.
The generator writes straight into the journal schema with executemany (indexes built after
the load, then ANALYZE), which is how a backfill should do it; the queries then go through
SqliteStore exactly as the dashboard calls them.
"""

from __future__ import annotations

import argparse
import json
import sqlite3
import sys
import tempfile
import time
from collections.abc import Callable, Iterator
from datetime import UTC, datetime, timedelta
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

from gateway.store import SqliteStore, open_journal
from gateway.store.journal import _INSERT_CALIBRATION, _INSERT_RESULT
from gateway.store.schema import MIGRATIONS
from gateway.store.summaries import rebuild_summaries

STATIONS = [(f"L1-S{i}", "L1", "HX-210" if i % 2 else "HX-230") for i in range(1, 7)] + [
    (f"L2-S{i}", "L2", "MV-44") for i in range(1, 7)
]
CYCLE_S = 30.0  # one test per station every 30 s
START = datetime(2026, 1, 5, tzinfo=UTC)
US = 1_000_000


def _result_rows(n: int, seed: int = 1) -> Iterator[tuple[Any, ...]]:
    rng = np.random.default_rng(seed)
    k = len(STATIONS)
    start_us = int(START.timestamp()) * US
    step_us = int(CYCLE_S * US / k)
    chunk = 100_000
    for base in range(0, n, chunk):
        m = min(chunk, n - base)
        idx = np.arange(base, base + m)
        leak = rng.lognormal(np.log(0.5), 0.45, m)
        loss = 10.0 + leak * 24.0 + rng.normal(0, 0.3, m)
        aborted = rng.random(m) < 0.004
        no_id = rng.random(m) < 0.02
        retest = rng.random(m) < 0.04
        for j in range(m):
            i = int(idx[j])
            station, line, program = STATIONS[i % k]
            ended = start_us + i * step_us
            lr = float(leak[j])
            verdict = (
                "aborted" if aborted[j] else "pass" if lr < 1.5 else "gross" if lr > 4 else "reject"
            )
            # a retest reuses the part id of this station's test three cycles earlier
            part = None if no_id[j] else f"P{(i - 3 * k) if retest[j] and i >= 3 * k else i:09d}"
            yield (
                f"{i:024x}", station, line, i // k, ended, ended + 80_000, program, verdict,
                300_000.0, float(loss[j]), lr, 1.5, 3.0, 6.0, 4.0, part, "", None, 21.0,
                None, "", "bench@1",
            )  # fmt: skip


def _calibration_rows(n_results: int) -> Iterator[tuple[Any, ...]]:
    span_s = n_results * CYCLE_S / len(STATIONS)
    every_s = 4 * 3600
    rng = np.random.default_rng(2)
    for s, (station, line, program) in enumerate(STATIONS):
        for c in range(int(span_s // every_s) + 1):
            ended = int((START.timestamp() + c * every_s + s * 60) * US)
            master = 10.0 + 0.0005 * c + rng.normal(0, 0.05)
            standard = master + 48.0 + rng.normal(0, 0.3)
            yield (
                f"c{s:04d}{c:019x}", station, line, ended, ended + 1_000_000, program, master,
                standard, 2.0, 300_000.0, standard / master, 2.0 / (standard - master), 1, "",
                "", "bench@1",
            )  # fmt: skip


def build(path: Path, n: int) -> dict[str, float]:
    t = time.perf_counter()
    for stale in (path, Path(f"{path}-wal"), Path(f"{path}-shm")):
        stale.unlink(missing_ok=True)
    open_journal(str(path)).close()  # schema through the real migration path
    conn = sqlite3.connect(path, isolation_level=None)
    conn.execute("PRAGMA synchronous=OFF")
    conn.execute("PRAGMA cache_size=-262144")
    # indexes are built after the load (faster), the summaries from the loaded rows (the
    # same fold the journal does per batch, here in one pass)
    indexes = [
        s for m in MIGRATIONS for s in m.statements if s.startswith("CREATE INDEX ix_results")
    ]
    for stmt in indexes:
        conn.execute(f"DROP INDEX {stmt.split()[2]}")
    conn.execute("BEGIN")
    conn.executemany(_INSERT_RESULT, _result_rows(n))
    conn.executemany(_INSERT_CALIBRATION, _calibration_rows(n))
    rebuild_summaries(conn)
    conn.execute("COMMIT")
    load = time.perf_counter() - t
    for stmt in indexes:
        conn.execute(stmt)
    conn.execute("ANALYZE")
    conn.execute("PRAGMA wal_checkpoint(TRUNCATE)")
    conn.close()
    return {"load_s": round(load, 1), "build_s": round(time.perf_counter() - t, 1)}


def _time(fn: Callable[[], pd.DataFrame], repeat: int = 3) -> tuple[float, int]:
    best = float("inf")
    rows = 0
    for _ in range(repeat):
        t = time.perf_counter()
        rows = len(fn())
        best = min(best, time.perf_counter() - t)
    return round(best, 3), rows


def time_queries(store: Any, end: datetime) -> dict[str, Any]:
    """The dashboard's main queries on any store (SQLite journal or InfluxDB), best of three,
    over the month and week before ``end``."""
    month = (end - timedelta(days=30), end)
    week = (end - timedelta(days=7), end)
    edges = list(np.linspace(0.0, 3.0, 51))
    queries: dict[str, Callable[[], pd.DataFrame]] = {
        "yield_s": lambda: store.verdict_counts(*month, by=("station",), bucket="day"),
        "first_pass_s": lambda: store.first_pass_counts(*month, by=("station",), bucket="day"),
        "first_pass_week_s": lambda: store.first_pass_counts(*week, by=("station",)),
        "histogram_s": lambda: store.histogram(*month, edges, station="L1-S1", program="HX-210"),
        "calibration_s": lambda: store.calibration_series("L1-S1", "HX-210", *month),
        "leak_summary_s": lambda: store.leak_summary(*month, by=("station", "program")),
        "yield_by_line_hour_s": lambda: store.verdict_counts(*week, by=("line",), bucket="hour"),
        "fleet_latest_s": store.latest_results_per_station,
        "stations_s": store.stations,
        "station_page_s": lambda: store.results(station="L1-S1", limit=200, newest_first=True),
    }
    out: dict[str, Any] = {}
    for name, fn in queries.items():
        seconds, rows = _time(fn)
        out[name] = seconds
        out[name.removesuffix("_s") + "_rows"] = rows
    return out


def run_queries(path: Path, n: int) -> dict[str, Any]:
    store = SqliteStore(path)
    end = START + timedelta(seconds=n * CYCLE_S / len(STATIONS))
    month = (end - timedelta(days=30), end)
    out = time_queries(store, end)
    with sqlite3.connect(path) as conn:
        month_rows = conn.execute(
            "SELECT COUNT(*) FROM results WHERE ended_at >= ?",
            (int(month[0].timestamp()) * US,),
        ).fetchone()[0]
    store.close()
    out["month_rows"] = month_rows
    return out


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawTextHelpFormatter)
    ap.add_argument("--results", type=int, default=1_000_000)
    ap.add_argument("--db", type=Path, help="journal to build (or reuse with --reuse)")
    ap.add_argument("--reuse", action="store_true", help="query an existing --db, do not build")
    args = ap.parse_args(argv)
    with tempfile.TemporaryDirectory() as tmp:
        path = args.db or Path(tmp) / "bench.db"
        built = {} if args.reuse else build(path, args.results)
        figures = run_queries(path, args.results)
        size_mb = round(path.stat().st_size / 2**20)
    doc = {
        "dashboard_queries": {
            "rows": args.results,
            "stations": len(STATIONS),
            "db_mb": size_mb,
            **built,
            **figures,
            "sqlite": sqlite3.sqlite_version,
            "python": sys.version.split()[0],
        }
    }
    print(json.dumps(doc, indent=2))
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
