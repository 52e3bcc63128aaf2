"""import_rate: ``leakfleet import`` of a long station log, beside plain ``executemany``.

The file is the lf-delim sample's lines repeated with fresh cycles and days (valid results,
calibrations and the sample's bad lines, which go to the quarantine). The baseline is the
same number of rows inserted with one plain ``executemany`` into a bare table (what SQLite
can take at best on this machine), so the ratio says what parsing, validation, the canonical
record and the journal's dedup cost. One parsing process, then two (the machine has two cores).
"""

from __future__ import annotations

import sqlite3
import tempfile
import time
from pathlib import Path
from typing import Any

from gateway.importer import import_file, state_path
from gateway.profiles import StationContext, load_profile
from gateway.store import open_journal

SAMPLE = Path(__file__).resolve().parents[1] / "gateway" / "profiles" / "samples" / "lf-delim.txt"


def write_history(path: Path, lines: int) -> int:
    base = SAMPLE.read_text(encoding="utf-8").splitlines()
    n = 0
    with path.open("w", encoding="utf-8") as fh:
        k = 0
        while n < lines:
            day = f"20{10 + k // 336:02d}-{1 + k // 28 % 12:02d}-{1 + k % 28:02d}"
            for line in base:
                f = line.split(";")
                if f[0] == "R":
                    f[1], f[2] = str(k * 100 + int(f[1]) % 100), day + f[2][10:]
                elif f[0] == "C":
                    f[1] = day + f[1][10:]
                fh.write(";".join(f) + "\n")
                n += 1
            k += 1
    return n


def _executemany(rows: int, tmp: Path) -> float:
    con = sqlite3.connect(tmp / "plain.db")
    con.execute("CREATE TABLE t (station TEXT, cycle INTEGER, ended_at TEXT, verdict TEXT, "
                "leak REAL, loss REAL, raw TEXT, UNIQUE (station, cycle, ended_at))")
    data = [("S", i, f"2026-01-01T00:00:{i}", "pass", 0.1, 1.0, "R;x" * 20) for i in range(rows)]
    t = time.perf_counter()
    con.executemany("INSERT OR IGNORE INTO t VALUES (?, ?, ?, ?, ?, ?, ?)", data)
    con.commit()
    dt = time.perf_counter() - t
    con.close()
    return rows / dt


def run(lines: int) -> dict[str, Any]:
    profile = load_profile("lf-delim")
    ctx = StationContext(station="B1-S1", line="B1")
    out: dict[str, Any] = {}
    with tempfile.TemporaryDirectory() as d:
        tmp = Path(d)
        hist = tmp / "history.txt"
        n = write_history(hist, lines)
        for jobs in (1, 2):
            db = tmp / f"j{jobs}.db"
            t = time.perf_counter()
            with open_journal(f"sqlite:///{db}") as journal:
                stats = import_file(hist, profile=profile, ctx=ctx, journal=journal,
                                    state_file=state_path(db), jobs=jobs)
            dt = time.perf_counter() - t
            out[f"jobs_{jobs}"] = {"lines_per_s": round(n / dt), "seconds": round(dt, 1),
                                   "stored": stats.stored, "quarantined": stats.quarantined}
        plain = _executemany(n, tmp)
        again_t = time.perf_counter()
        with open_journal(f"sqlite:///{tmp / 'j1.db'}") as journal:
            again = import_file(hist, profile=profile, ctx=ctx, journal=journal,
                                state_file=state_path(tmp / "j1.db"), restart=True)
        out["reimport"] = {"stored": again.stored, "seconds":
                           round(time.perf_counter() - again_t, 1)}
    best = max(out["jobs_1"]["lines_per_s"], out["jobs_2"]["lines_per_s"])
    return {
        "lines_per_s": best,
        "ratio_to_executemany": round(best / plain, 3),
        "second_process_speedup": round(out["jobs_2"]["lines_per_s"]
                                        / out["jobs_1"]["lines_per_s"], 2),
        **out,
        "baseline": {"executemany_rows_per_s": round(plain)},
        # the >= 0.5 ingest target is the journal writer's (bench "ingest"); here parsing
        # every line through the profile is the point, so the ratio is shown, not judged
        "target": {"reimport.stored": "== 0"},
        "inputs": {"lines": n, "profile": "lf-delim", "chunk_lines": 20_000,
},
    }
