"""Journal write throughput against plain sqlite3.executemany of the same rows and indexes.

Run: python bench/store_write.py [--records N] [--batch B]; prints one JSON document.
Not a test: figures depend on the machine; the ratio is what holds on a noisy one.
"""

from __future__ import annotations

import argparse
import json
import sqlite3
import sys
import tempfile
import time
from collections.abc import Sequence
from datetime import UTC, datetime, timedelta
from pathlib import Path

from gateway.records import TestResult, Verdict
from gateway.store import open_journal
from gateway.store.journal import _INSERT_RESULT, CACHE_SIZE, _result_row
from gateway.store.schema import MIGRATIONS, Migration, migrate


def make_results(n: int) -> list[TestResult]:
    t0 = datetime(2026, 3, 2, 6, tzinfo=UTC)
    out = []
    for i in range(n):
        ended = t0 + timedelta(seconds=2 * i, microseconds=i % 997)
        out.append(
            TestResult(
                station=f"L{1 + i % 2}-S{i % 12}",
                line=f"L{1 + i % 2}",
                cycle=i,
                ended_at=ended,
                received_at=ended + timedelta(milliseconds=80),
                program="HX-210" if i % 3 else "MV-44",
                verdict=Verdict.PASS if i % 17 else Verdict.REJECT,
                test_pressure_pa=300_000.0 + i % 50,
                pressure_loss_pa=10 + (i % 100) / 10,
                leak_rate_sccm=(i % 200) / 100,
                reject_limit_sccm=2.0,
                fill_s=3.0,
                stabilise_s=6.0,
                test_s=4.0,
                part_id=f"HX210-{i:08d}",
                raw=f"{i};L1-S{i % 12};HX-210;P;0.42;12.5",
                profile="lf-delim@1",
            )
        )
    return out


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__)
    ap.add_argument("--records", type=int, default=100_000)
    ap.add_argument("--batch", type=int, default=500)
    args = ap.parse_args(argv)
    records = make_results(args.records)
    batches = [records[i : i + args.batch] for i in range(0, len(records), args.batch)]
    with tempfile.TemporaryDirectory() as tmp:
        journal = open_journal(str(Path(tmp) / "ours.db"))
        t = time.perf_counter()
        for b in batches:
            journal.write(b)
        ours = time.perf_counter() - t
        journal.close()

        # Baselines: same pragmas, rows prepared before the clock starts (so they measure
        # SQLite alone), same batch size, one transaction per batch. "baseline" is plain
        # executemany into the journal's current tables and indexes (no summaries kept);
        # "v1_triggers" is schema v1, whose per-row triggers kept the summaries.
        def baseline(name: str, migrations: Sequence[Migration]) -> float:
            conn = sqlite3.connect(str(Path(tmp) / name), isolation_level=None)
            conn.execute("PRAGMA journal_mode=WAL")
            conn.execute("PRAGMA synchronous=NORMAL")
            conn.execute(f"PRAGMA cache_size = {CACHE_SIZE}")
            migrate(conn, migrations)
            row_batches = [[_result_row(r) for r in b] for b in batches]
            t = time.perf_counter()
            for rows in row_batches:
                conn.execute("BEGIN IMMEDIATE")
                conn.executemany(_INSERT_RESULT, rows)
                conn.execute("COMMIT")
            elapsed = time.perf_counter() - t
            conn.close()
            return elapsed

        base = baseline("base.db", MIGRATIONS)
        v1 = baseline("v1.db", MIGRATIONS[:1])
    doc = {
        "ingest_journal": {
            "records": args.records,
            "batch": args.batch,
            "records_per_s": round(args.records / ours),
            "baseline_records_per_s": round(args.records / base),
            "ratio": round(base / ours, 3),
            "v1_triggers_records_per_s": round(args.records / v1),
            "sqlite": sqlite3.sqlite_version,
            "python": sys.version.split()[0],
        }
    }
    print(json.dumps(doc, indent=2))
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
