"""startup: how long a user waits for ``leakfleet --help`` and for a started gateway's first poll.

Each figure stands beside ``python -c pass`` (the interpreter's own start) measured in the same
run, best of ``repeats``. The gateway figure is from spawning ``leakfleet gateway`` to its log
saying the first station answered (``start -> online``), one lf-mbtcp station of the bench farm
polled every 0.1 s.
"""

from __future__ import annotations

import os
import subprocess
import sys
import tempfile
import time
from pathlib import Path
from typing import Any

from bench.modbus import REPO, Farm, _config

ENV = {**os.environ, "PYTHONPATH": str(REPO)}


def _best(argv: list[str], repeats: int) -> float:
    best = float("inf")
    for _ in range(repeats):
        t = time.perf_counter()
        subprocess.run(argv, cwd=REPO, env=ENV, check=True, stdout=subprocess.DEVNULL,
                       stderr=subprocess.DEVNULL, timeout=60)
        best = min(best, time.perf_counter() - t)
    return best


def _first_poll(tmp: Path, port: int) -> float:
    cfg = tmp / "gateway.toml"
    cfg.write_text(_config([port], f"sqlite:///{tmp / 'journal.db'}").replace(
        'poll_interval = "1 s"', 'poll_interval = "0.1 s"'))
    log = tmp / "gateway.log"
    with log.open("wb") as err:
        t = time.perf_counter()
        proc = subprocess.Popen([sys.executable, "-m", "gateway", "gateway", "--config",
                                 str(cfg)], cwd=REPO, env=ENV, stdout=subprocess.DEVNULL,
                                stderr=err)
        try:
            while "-> online" not in log.read_text(errors="replace"):
                if proc.poll() is not None or time.perf_counter() - t > 60:
                    raise RuntimeError(f"gateway did not poll: {log.read_text()[-1000:]}")
                time.sleep(0.005)
            return time.perf_counter() - t
        finally:
            proc.terminate()
            proc.wait(30)
            (tmp / "journal.db").unlink(missing_ok=True)


def run(repeats: int = 5) -> dict[str, Any]:
    python = _best([sys.executable, "-c", "pass"], repeats)
    helps = _best([sys.executable, "-m", "gateway", "--help"], repeats)
    report = _best([sys.executable, "-m", "gateway", "report", "--help"], repeats)
    farm = Farm(1, 2.0)
    try:
        with tempfile.TemporaryDirectory() as tmp:
            first = min(_first_poll(Path(tmp), farm.ports[0]) for _ in range(3))
    finally:
        farm.stop()
    return {
        "python_s": round(python, 3),
        "help_s": round(helps, 3), "help_x_python": round(helps / python, 1),
        "report_help_s": round(report, 3),
        "gateway_first_poll_s": round(first, 3),
        "first_poll_x_python": round(first / python, 1),
        "target": {"help_s": "reported beside python -c pass", "gateway_first_poll_s":
                   "reported beside python -c pass"},
        "inputs": {"repeats": repeats, "station": "one lf-mbtcp farm station, poll 0.1 s",
                   "measured": "spawn to exit (help); spawn to the log's first '-> online' "
                               "(gateway)"},
    }  # fmt: skip
