"""``python -m bench [--quick] [--json] [--only NAME ...]``: every benchmark with its baseline.

Prints one JSON document (keys: ingest, import_rate, modbus_poll, mqtt_latency,
dashboard_queries, dashboard_browser, rss_mb, chaos, catchup, scaleout, startup; each with its
inputs beside its figures); progress goes to stderr. ``--json`` prints it compact on one line
(for tools); without it, indented. A benchmark that cannot run here says why under
``missing`` instead of failing the run.
"""

from __future__ import annotations

import argparse
import json
import platform
import sqlite3
import sys
import tempfile
import time
import traceback
from collections.abc import Callable
from datetime import UTC, datetime, timedelta
from pathlib import Path
from typing import Any

NAMES = ("ingest", "import_rate", "modbus_poll", "mqtt_latency", "dashboard_queries",
         "dashboard_browser", "rss_mb", "chaos", "catchup", "scaleout", "startup")


def _log(msg: str) -> None:
    print(f"[bench] {msg}", file=sys.stderr, flush=True)


def _versions() -> dict[str, str]:
    import pymodbus

    return {"python": platform.python_version(), "sqlite": sqlite3.sqlite_version,
            "pymodbus": pymodbus.__version__}  # fmt: skip


def bench_ingest(quick: bool) -> dict[str, Any]:
    from bench.ingest import run

    return run(records=50_000 if quick else 200_000, batch=500)


def bench_chaos(quick: bool) -> dict[str, Any]:
    from bench.chaos import run

    return run(wall_s=45.0 if quick else 150.0)


def bench_catchup(quick: bool) -> dict[str, Any]:
    from bench.catchup import run

    return run(minutes=30.0 if quick else 60.0)


def bench_browser(quick: bool) -> dict[str, Any]:
    from bench.dashboard_browser import run

    return run(results=1_000_000 if quick else 10_000_000)


def bench_scaleout(quick: bool) -> dict[str, Any]:
    from bench.scaleout import run

    return run(gateways=3, stations=1500, seconds=90.0 if quick else 300.0)


def bench_startup(quick: bool) -> dict[str, Any]:
    from bench.startup import run

    return run(repeats=3 if quick else 7)


def bench_import(quick: bool) -> dict[str, Any]:
    from bench.importing import run

    return run(lines=200_000 if quick else 10_000_000)


def bench_modbus(quick: bool, shared: dict[str, Any]) -> dict[str, Any]:
    from bench.modbus import capacity, poll_ratio

    ratio = poll_ratio(300 if quick else 1000)
    steps = [200, 500, 750] if quick else [200, 500, 750, 1000, 1500]
    seconds = 15.0 if quick else 30.0
    period = 2.0
    cap = capacity(steps, seconds, period)
    shared["capacity"] = cap
    return {
        "ratio": ratio["ratio"],
        "max_stations_1hz": cap["max_stations_1hz"],
        "target": {"ratio": "<= 1.3 in 9 runs of 10", "max_stations_1hz": ">= 500"},
        "detect_read": ratio,
        "steps": cap["steps"],
        "inputs": {"profile": "lf-mbtcp", "poll_interval_s": 1.0, "result_period_s": period,
                   "ring_depth": 8, "step_seconds": seconds, "stations_tried": steps,
                   "pass_rule": "every published result journalled once, no gap, p99 "
                                "detection latency <= 2 s",
                   "farm": "one process, one pymodbus TCP server per station"},
    }  # fmt: skip


def bench_rss(quick: bool, shared: dict[str, Any]) -> dict[str, Any]:
    from bench.modbus import capacity_step

    cap = shared.get("capacity", {})
    step = next((s for s in cap.get("steps", []) if s["stations"] == 200), None)
    if step is None:
        step = capacity_step(200, 15.0 if quick else 30.0, 2.0)
    return {
        "stations": 200,
        "rss_mb": step["rss_mb"],
        "peak_rss_mb": step["rss_hwm_mb"],
        "target": {"rss_mb": "<= 100"},
        "inputs": {"profile": "lf-mbtcp", "poll_interval_s": 1.0, "seconds": step["seconds"],
                   "measured": "VmRSS of the gateway process, max over the second half"},
    }  # fmt: skip


def bench_mqtt(quick: bool) -> dict[str, Any]:
    import importlib.util

    import aiomqtt

    base: dict[str, Any] = {"stations": 200, "p50_ms": None, "p99_ms": None,
                            "target": {"p99_ms": "<= 50",
                                       "ratio_p50": "<= 1.3 x bare client",
                                       "ratio_p99": "<= 1.3 x bare client"}}  # fmt: skip
    if importlib.util.find_spec("gateway.sinks.mqtt") is None:
        return {**base, "missing": "the MQTT sink (gateway/sinks/mqtt.py) is not on this "
                                   "branch: nothing publishes results yet"}
    from bench.mqtt import run

    seconds = 15.0 if quick else 40.0
    default = run(200, seconds, None)  # the broker with set_tcp_nodelay true, as deploy/ sets
    nagle = run(200, seconds, None, nodelay=False)  # Mosquitto's own default
    return {
        **base, **{k: default.get(k) for k in ("p50_ms", "p99_ms", "ratio_p50", "ratio_p99")},
        "default": default, "broker_default_nagle": nagle,
        "inputs": {"stations": 200, "poll_interval_s": 1.0, "result_period_s": 2.0,
                   "seconds": seconds, "qos": 1, "aiomqtt": aiomqtt.__version__,
                   "broker": "mosquitto, set_tcp_nodelay true (and false for comparison)",
                   "measured": "subscriber arrival minus the record's received_at; the bare "
                               "client replays the gateway's arrivals and sizes"},
    }  # fmt: skip


def bench_queries(quick: bool) -> dict[str, Any]:
    import numpy as np

    from gateway.store import SqliteStore
    from sim.backfill import backfill

    n = 1_000_000 if quick else 10_000_000
    end = datetime(2026, 11, 28, 18, tzinfo=UTC)
    with tempfile.TemporaryDirectory() as tmp:
        db = Path(tmp) / "history.db"
        last = [0.0]

        def progress(done: int, total: int) -> None:
            if time.monotonic() - last[0] > 10 or done == total:
                last[0] = time.monotonic()
                _log(f"  backfill {done:,}/{total:,}")

        stats = backfill(f"sqlite:///{db}", n, end=end, progress=progress)
        store = SqliteStore(db)
        month = (end - timedelta(days=30), end)
        edges = list(np.linspace(-1.0, 3.0, 41))
        queries: dict[str, Callable[[], Any]] = {
            "yield_s": lambda: store.first_pass_counts(*month, by=("station",), bucket="day"),
            "histogram_s": lambda: store.histogram(*month, edges, station="L1-S1",
                                                   program="HX-210"),
            "calibration_s": lambda: store.calibration_series("L1-S1", "HX-210", *month),
            "verdicts_by_hour_s": lambda: store.verdict_counts(*month, by=("line",),
                                                               bucket="hour"),
            "leak_summary_s": lambda: store.leak_summary(*month, by=("station", "program")),
        }  # fmt: skip
        out: dict[str, Any] = {"rows": stats.results}
        shapes: dict[str, int] = {}
        for name, fn in queries.items():
            best = float("inf")
            for _ in range(3):
                t = time.perf_counter()
                frame = fn()
                best = min(best, time.perf_counter() - t)
            out[name] = round(best, 4)
            shapes[name.removesuffix("_s")] = len(frame)
        store.close()
        size_mb = round(db.stat().st_size / 2**20)
    return {
        **out,
        "target": {"each_s": "<= 1"},
        "inputs": {"results": stats.results, "calibrations": stats.calibrations,
                   "history": f"{stats.first:%Y-%m-%d}..{stats.last:%Y-%m-%d}",
                   "window": "last 30 days", "stations": 6, "backfill_s": stats.seconds,
                   "db_mb": size_mb, "rows_returned": shapes,
                   "generator": "leakfleet sim backfill (demo plant)"},
    }  # fmt: skip


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(prog="python -m bench", description=__doc__,
                                 formatter_class=argparse.RawDescriptionHelpFormatter)
    ap.add_argument("--quick", action="store_true", help="smaller inputs (≈5 min on 2 cores)")
    ap.add_argument("--json", action="store_true", help="compact JSON on one line")
    ap.add_argument("--only", nargs="+", choices=NAMES, help="run only these benchmarks")
    args = ap.parse_args(argv)
    names = args.only or list(NAMES)
    shared: dict[str, Any] = {}
    runners: dict[str, Callable[[], dict[str, Any]]] = {
        "ingest": lambda: bench_ingest(args.quick),
        "import_rate": lambda: bench_import(args.quick),
        "chaos": lambda: bench_chaos(args.quick),
        "modbus_poll": lambda: bench_modbus(args.quick, shared),
        "mqtt_latency": lambda: bench_mqtt(args.quick),
        "dashboard_queries": lambda: bench_queries(args.quick),
        "rss_mb": lambda: bench_rss(args.quick, shared),
        "catchup": lambda: bench_catchup(args.quick),
        "dashboard_browser": lambda: bench_browser(args.quick),
        "scaleout": lambda: bench_scaleout(args.quick),
        "startup": lambda: bench_startup(args.quick),
    }
    doc: dict[str, Any] = {
        "run": {"quick": args.quick, "started": datetime.now(UTC).isoformat(timespec="seconds"),
                "cpus": _cpus(), **_versions()},
    }  # fmt: skip
    t0 = time.monotonic()
    for name in NAMES:
        if name not in names:
            continue
        _log(f"{name} ...")
        t = time.monotonic()
        try:
            doc[name] = runners[name]()
        except Exception as exc:  # one benchmark failing must not hide the others' figures
            _log(traceback.format_exc())
            doc[name] = {"error": f"{type(exc).__name__}: {exc}"}
        doc[name]["bench_s"] = round(time.monotonic() - t, 1)
        _log(f"{name} done in {doc[name]['bench_s']} s")
    doc["run"]["seconds"] = round(time.monotonic() - t0, 1)
    print(json.dumps(doc) if args.json else json.dumps(doc, indent=2))
    return 0


def _cpus() -> int:
    import os

    return len(os.sched_getaffinity(0))


if __name__ == "__main__":
    sys.exit(main())
