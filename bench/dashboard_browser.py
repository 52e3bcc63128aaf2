"""dashboard_browser: each page as a person sees it, on a long history, in SQLite and InfluxDB.

The demo plant's history (``leakfleet sim backfill``: 10 M results, ``--quick`` 1 M) is served
by ``leakfleet dashboard`` from the SQLite journal, then from an InfluxDB holding the same
records (written through the gateway's InfluxDB sink, as a scale-out plant's would be). Debian's
Chromium, driven by Playwright, opens every page from the sidebar and times the click until the
page's own text is there, every chart is drawn and Streamlit's "running" indicator is gone.
Pages that need the journal (pressure curves, gateway health) are timed on SQLite only. The
dashboard's clock is the newest record (``--clock data``), so "today" is the history's last day.

It starts InfluxDB with the test suite's helper (``tests/support``): run it from the repository
root, ``.venv/bin/python -m bench --only dashboard_browser``.
"""

from __future__ import annotations

import asyncio
import os
import signal
import socket
import subprocess
import sys
import tempfile
import time
from datetime import UTC, datetime
from pathlib import Path
from typing import Any

from bench.modbus import REPO

CHROMIUM = Path("/usr/bin/chromium")
ARGS = ["--headless", "--no-sandbox", "--disable-gpu", "--disable-background-networking",
        "--disable-component-update", "--disable-sync", "--no-first-run"]
PAGES = [  # (sidebar entry, a text the page shows once its data is there, journal only)
    ("Fleet live", "cycles in the last hour", False),
    ("Station", "Leak rate against the reject limit", False),
    ("Yield", "First-pass yield", False),
    ("Shift report", "First-pass yield", False),  # a metric: drawn once the report is built
    ("Readings vs limits", "Ppu", False),
    ("Calibration", "Calibrations", False),
    ("Gauge study & test time", "qualified person", False),
    ("Quality", "Part history", False),
    ("Data", "Download CSV", False),
    ("Gateway & sink health", "Quarantined lines, 24 h", True),
]


def _log(msg: str) -> None:
    print(f"[bench] {msg}", file=sys.stderr, flush=True)


def _free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return int(s.getsockname()[1])


def _serve(store: str, tmp: Path) -> tuple[subprocess.Popen[bytes], str]:
    port = _free_port()
    log = (tmp / f"dashboard-{port}.log").open("wb")
    proc = subprocess.Popen(
        [sys.executable, "-m", "gateway", "dashboard", "--store", store, "--port", str(port),
         "--config", "demo", "--clock", "data"],
        cwd=REPO, stdout=log, stderr=subprocess.STDOUT,
        env={**os.environ, "PYTHONPATH": str(REPO)},
    )  # fmt: skip
    deadline = time.monotonic() + 60
    while True:
        with socket.socket() as s:
            if s.connect_ex(("127.0.0.1", port)) == 0:
                break
        if proc.poll() is not None or time.monotonic() > deadline:
            raise RuntimeError(f"dashboard did not start on {store}")
        time.sleep(0.2)
    return proc, f"http://127.0.0.1:{port}/"


def _time_pages(url: str, journal: bool, repeats: int) -> dict[str, Any]:
    from playwright.sync_api import sync_playwright

    out: dict[str, Any] = {}
    with sync_playwright() as pw:
        browser = pw.chromium.launch(executable_path=str(CHROMIUM), args=ARGS)
        page = browser.new_page(viewport={"width": 1920, "height": 1080})
        page.goto(url, timeout=120_000)
        page.get_by_text("cycles in the last hour").first.wait_for(timeout=120_000)
        for name, marker, journal_only in PAGES:
            if journal_only and not journal:
                continue
            best = float("inf")
            for _ in range(repeats):
                other = "Data" if name != "Data" else "Yield"  # leave, then come back
                page.locator("[data-testid='stSidebarNav'] a", has_text=other).first.click()
                page.wait_for_timeout(300)
                _settled(page)
                t = time.perf_counter()
                page.locator("[data-testid='stSidebarNav'] a", has_text=name).first.click()
                page.get_by_text(marker).first.wait_for(state="attached", timeout=120_000)
                _settled(page)
                best = min(best, time.perf_counter() - t)
            errors = page.locator("[data-testid='stException'], [data-testid='stAlert'] "
                                  ":text('Traceback')").count()
            out[name] = {"seconds": round(best, 2), "errors": errors}
        browser.close()
    return out


def _settled(page: Any) -> None:
    """Streamlit has finished the script run and every chart on the page is drawn."""
    page.wait_for_function(
        """() => {
            const running = document.querySelector("[data-testid='stStatusWidget']");
            if (running && running.innerText.includes("Running")) return false;
            const charts = document.querySelectorAll("[data-testid='stVegaLiteChart']");
            for (const c of charts) {
                if (!c.querySelector("canvas, svg")) return false;
            }
            return true;
        }""",
        timeout=120_000, polling=100,
    )
    page.wait_for_timeout(150)  # and stays so (a rerun may start right after)
    page.wait_for_function(
        """() => { const r = document.querySelector("[data-testid='stStatusWidget']");
                   return !(r && r.innerText.includes("Running")); }""",
        timeout=120_000, polling=100,
    )


async def _to_influx(db_path: Path, url: str) -> tuple[int, float]:
    from gateway.sinks import SinkContext
    from gateway.sinks.influx import make_influx
    from gateway.store import open_journal

    ctx = SinkContext(site="Northmere Works", gateway_id="bench",
                      store_url=f"sqlite:///{db_path}", stations={})  # its part summaries too
    fwd = make_influx("bulk", {"url": url, "batch_size": 5000, "timeout_s": 120,
                               "kinds": ["result", "calibration"]}, ctx)
    stop = asyncio.Event()
    t = time.monotonic()
    with open_journal(f"sqlite:///{db_path}") as j:
        total = j.max_seq("result")
        task = asyncio.create_task(fwd.run_with(j, stop))
        last = 0.0
        while j.get_cursor("bulk", "result") < total:
            if task.done():
                task.result()
                raise RuntimeError("the InfluxDB load stopped early")
            if time.monotonic() - last > 15:
                last = time.monotonic()
                _log(f"  influx load {j.get_cursor('bulk', 'result'):,}/{total:,}")
            await asyncio.sleep(0.5)
        stop.set()
        await asyncio.wait_for(task, 120)
    return total, time.monotonic() - t


def _queries(url: str, end: datetime) -> dict[str, Any]:
    """The dashboard's main store queries (``bench.store_queries``) timed on one store."""
    from bench.store_queries import time_queries
    from gateway.store import open_store

    store = open_store(url)
    try:
        return {k: v for k, v in time_queries(store, end).items() if k.endswith("_s")}
    finally:
        store.close()


def run(results: int, repeats: int = 2) -> dict[str, Any]:
    if not CHROMIUM.exists():
        return {"missing": "Debian's chromium is not installed (/usr/bin/chromium)"}
    from sim.backfill import backfill
    from tests.support.servers import InfluxServer

    out: dict[str, Any] = {}
    with tempfile.TemporaryDirectory() as tmp_name:
        tmp = Path(tmp_name)
        db = tmp / "history.db"
        _log(f"dashboard_browser: backfill {results:,} results")
        stats = backfill(f"sqlite:///{db}", results, end=datetime.now(UTC))
        out["queries"] = {"sqlite": _queries(f"sqlite:///{db}", stats.last)}
        proc, url = _serve(f"sqlite:///{db}", tmp)
        try:
            out["sqlite"] = _time_pages(url, True, repeats)
        finally:
            proc.send_signal(signal.SIGINT)
            proc.wait(30)
        influx = InfluxServer(tmp / "influx")
        influx.start()
        try:
            influx.create_database("plant")
            loaded, load_s = asyncio.run(_to_influx(db, influx.url("plant")))
            out["influx_load"] = {"records": loaded, "seconds": round(load_s, 1)}
            out["queries"]["influxdb"] = _queries(influx.url("plant"), stats.last)
            proc, url = _serve(influx.url("plant"), tmp)
            try:
                out["influxdb"] = _time_pages(url, False, repeats)
            finally:
                proc.send_signal(signal.SIGINT)
                proc.wait(30)
        finally:
            influx.stop()
    worst = max(p["seconds"] for store in ("sqlite", "influxdb") for p in out[store].values())
    return {
        **out, "worst_s": worst,
        "target": {"each_s": "<= 2 (click to charts drawn)"},
        "inputs": {"results": stats.results, "calibrations": stats.calibrations,
                   "history": f"{stats.first:%Y-%m-%d}..{stats.last:%Y-%m-%d}",
                   "browser": "Debian chromium, headless, 1920x1080, Playwright",
                   "measured": f"best of {repeats} visits: sidebar click to the page's "
                               "text, every chart drawn, no script run"},
    }  # fmt: skip
