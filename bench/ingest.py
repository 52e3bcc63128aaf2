"""ingest: lf-delim lines → parse + normalise (the profile) → journal, against plain SQLite.

Ours: each line goes through the built-in ``lf-delim`` profile's parser exactly as the stream
driver calls it (one line at a time), records are batched and written with ``Journal.write``:
one transaction per batch with the rows' INSERT OR IGNORE and the fold of the batch into the
hourly and per-part summaries (gateway/store/summaries.py; they keep the dashboard's yield
queries independent of the history's length).
Baseline: ``sqlite3.executemany`` of the same rows (prepared before the clock starts) into the
journal's schema (same columns and indexes), same pragmas, same batch size, one transaction per
batch, and no summaries: they are part of what the journal costs, so the ratio shows them.
Ours and both baselines take turns batch by batch (same lines, same rows), so the load of a
shared machine falls on all three alike.
``split`` tells where our time goes: parsing and ``Journal.write`` timed apart in the same run
(the clock is read once per batch, not per line), and ``journal_sql_us_per_record`` from a
second baseline that runs the journal's own SQL per batch (MAX(seq), executemany, fold) on the
prepared rows; ``journal_us_per_record`` minus that is the journal's Python work (row tuples,
record ids), and ``journal_sql`` minus ``baseline`` is what the summaries cost SQLite.
"""

from __future__ import annotations

import random
import sqlite3
import tempfile
import time
from datetime import UTC, datetime, timedelta
from pathlib import Path
from typing import Any

from gateway.profiles.decoders import serial_parser

PROFILE = "lf-delim"
_VERDICTS = ["ACC"] * 96 + ["REJ"] * 3 + ["GRS", "ABT"]


def make_lines(n: int, stations: int = 12, seed: int = 8) -> list[tuple[str, str]]:
    """(station, line) pairs in the lf-delim wire format (sim/README.md), with calibrations."""
    rng = random.Random(seed)
    t0 = datetime(2026, 11, 2, 6, 0, 0)
    out: list[tuple[str, str]] = []
    for i in range(n):
        station = f"L1-S{i % stations + 1}"
        ended = t0 + timedelta(seconds=30 * (i // stations))
        stamp = ended.strftime("%Y-%m-%d %H:%M:%S")
        if i % 200 == 199:
            out.append((station, f"C;{stamp};HX-210;38.6;{237 + rng.random():.1f};3.000;350.0;"
                                 "6.163;OK"))
            continue
        verdict = rng.choice(_VERDICTS)
        loss, leak = (0.0, 0.0) if verdict in ("GRS", "ABT") else (
            40 + rng.random() * 10, rng.lognormvariate(-2.5, 0.9))
        out.append((station, (
            f"R;{i // stations + 1};{stamp};HX-210;HX210-{i:06d};{verdict};"
            f"{350 + rng.random() / 10:.2f};{loss:.1f};{leak:.3f};2.000;-1.000;3.0;8.0;10.0;"
            f"{21 + rng.random():.2f}"
        )))  # fmt: skip
    return out


def run(records: int, batch: int) -> dict[str, Any]:
    from gateway.profiles import StationContext, load_profile
    from gateway.records import CalibrationEvent, Rejected, TestResult
    from gateway.store import open_journal
    from gateway.store.journal import _INSERT_RESULT, _MAX_RESULT_SEQ, CACHE_SIZE, _result_row
    from gateway.store.schema import migrate
    from gateway.store.summaries import fold_results

    profile = load_profile(PROFILE)
    assert profile.serial is not None
    lines = make_lines(records)
    stations = sorted({s for s, _ in lines})
    parsers = {
        s: serial_parser(profile.serial,
                         StationContext(station=s, line="L1", timezone="Europe/Berlin"))
        for s in stations
    }
    received = datetime(2026, 11, 2, 6, tzinfo=UTC)
    line_batches = [lines[i : i + batch] for i in range(0, len(lines), batch)]
    # the baselines' rows, prepared before any clock starts (an untimed parse of the same lines)
    kept: list[TestResult] = []
    rejected = 0
    for no, (station, line) in enumerate(lines, 1):
        for item in parsers[station].parse([line], no, received):
            if isinstance(item, TestResult):
                kept.append(item)
            elif isinstance(item, Rejected):
                rejected += 1
            elif not isinstance(item, CalibrationEvent):
                raise AssertionError(f"unexpected {item!r}")
    if rejected:
        raise AssertionError(f"{rejected} generated line(s) were rejected by {PROFILE}")
    row_batches: list[list[tuple[Any, ...]]] = []
    at = 0
    for lb in line_batches:  # the result rows of each batch of lines
        n = sum(1 for _, line in lb if line.startswith("R;"))
        row_batches.append([_result_row(r) for r in kept[at : at + n]])
        at += n
    assert at == len(kept)
    rows = [r for b in row_batches for r in b]
    parsers = {  # fresh parsers: the timed run starts where the untimed one did
        s: serial_parser(profile.serial,
                         StationContext(station=s, line="L1", timezone="Europe/Berlin"))
        for s in stations
    }

    def open_baseline(path: Path) -> sqlite3.Connection:
        conn = sqlite3.connect(str(path), isolation_level=None)
        conn.execute("PRAGMA journal_mode=WAL")
        conn.execute("PRAGMA synchronous=NORMAL")
        conn.execute(f"PRAGMA cache_size = {CACHE_SIZE}")
        migrate(conn)
        return conn

    with tempfile.TemporaryDirectory() as tmp:
        journal = open_journal(str(Path(tmp) / "ours.db"))
        plain_conn = open_baseline(Path(tmp) / "plain.db")
        sql_conn = open_baseline(Path(tmp) / "summaries.db")
        parse_s = write_s = plain = sql = 0.0
        no = 0
        # interleaved batch by batch, so a machine that speeds up or slows down meanwhile
        # weighs on ours and on both baselines alike
        for lb, b in zip(line_batches, row_batches, strict=True):
            t0 = time.perf_counter()
            pending: list[Any] = []
            for station, line in lb:
                no += 1
                pending.extend(parsers[station].parse([line], no, received))
            t1 = time.perf_counter()
            journal.write(pending)
            t2 = time.perf_counter()
            plain_conn.execute("BEGIN")
            plain_conn.executemany(_INSERT_RESULT, b)
            plain_conn.execute("COMMIT")
            t3 = time.perf_counter()
            # the SQL of Journal.write, without its Python
            sql_conn.execute("BEGIN IMMEDIATE")
            before = sql_conn.execute(_MAX_RESULT_SEQ).fetchone()[0] or 0
            sql_conn.executemany(_INSERT_RESULT, b)
            fold_results(sql_conn, before)
            sql_conn.execute("COMMIT")
            t4 = time.perf_counter()
            parse_s += t1 - t0
            write_s += t2 - t1
            plain += t3 - t2
            sql += t4 - t3
        ours = parse_s + write_s
        journal.close()
        plain_conn.close()
        sql_conn.close()
    ours_rate = len(lines) / ours
    base_rate = len(rows) / plain
    sql_rate = len(rows) / sql
    written = len(lines) - rejected
    return {
        "records_per_s": round(ours_rate),
        "baseline_records_per_s": round(base_rate),
        "ratio": round(ours_rate / base_rate, 3),
        "target": {"ratio": ">= 0.5", "records_per_s": ">= 20000"},
        "with_summaries_baseline_records_per_s": round(sql_rate),
        "ratio_to_with_summaries": round(ours_rate / sql_rate, 3),
        "split": {"parse_us_per_line": round(parse_s / len(lines) * 1e6, 1),
                  "journal_us_per_record": round(write_s / written * 1e6, 1),
                  "journal_sql_us_per_record": round(sql / len(rows) * 1e6, 1),
                  "baseline_us_per_record": round(plain / len(rows) * 1e6, 1)},
        "inputs": {"lines": len(lines), "results": len(kept), "stations": len(stations),
                   "batch": batch, "profile": f"{profile.name}@{profile.version}",
                   "sqlite": sqlite3.sqlite_version, "synchronous": "NORMAL", "wal": True,
                   "cache_size": CACHE_SIZE},
    }  # fmt: skip
