"""A ``leakfleet demo`` as a user starts it, and Debian's Chromium to look at it.

``running_demo(tmp_path, "--faults")`` starts the demo on free ports with its run directory in
the test's temp dir, waits for its dashboard URL and stops it with SIGINT (Ctrl-C) at the end.
Chromium is ``/usr/bin/chromium`` (installed by scripts/test-services.sh; never a browser
download), driven by Playwright.
"""

from __future__ import annotations

import contextlib
import os
import signal
import subprocess
import sys
import time
from collections.abc import Iterator
from dataclasses import dataclass
from pathlib import Path

from tests.support.servers import free_port

CHROMIUM = Path("/usr/bin/chromium")
CHROMIUM_ARGS = [
    "--headless", "--no-sandbox", "--disable-gpu", "--disable-background-networking",
    "--disable-component-update", "--disable-sync", "--no-first-run",
]  # fmt: skip
REPO = Path(__file__).resolve().parents[2]


@dataclass
class Demo:
    url: str
    proc: subprocess.Popen[str]
    log: Path
    run_dir: Path

    @property
    def journal(self) -> str:
        return f"sqlite:///{self.run_dir / 'demo.db'}"

    def output(self) -> str:
        return self.log.read_text()


@contextlib.contextmanager
def running_demo(tmp_path: Path, *extra: str, seconds: int = 120,
                 speed: int = 120) -> Iterator[Demo]:  # fmt: skip
    port = free_port()
    log_path = tmp_path / "demo.out"
    log = log_path.open("w")
    run_dir = tmp_path / "run"
    proc = subprocess.Popen(
        [sys.executable, "-m", "gateway", "demo", "--port", str(port), "--speed", str(speed),
         "--free-ports", "--run-dir", str(run_dir), "--seconds", str(seconds), *extra],
        cwd=REPO, stdout=log, stderr=subprocess.STDOUT, text=True,
        env={**os.environ, "PYTHONUNBUFFERED": "1"},
    )  # fmt: skip
    try:
        deadline = time.monotonic() + 60
        while "dashboard: http" not in log_path.read_text():
            assert proc.poll() is None, log_path.read_text()
            assert time.monotonic() < deadline, "the demo did not print its URL"
            time.sleep(0.2)
        yield Demo(f"http://127.0.0.1:{port}/", proc, log_path, run_dir)
    finally:
        if proc.poll() is None:
            proc.send_signal(signal.SIGINT)
            try:
                proc.wait(timeout=30)
            except subprocess.TimeoutExpired:
                proc.kill()
                proc.wait()
        log.close()


def screenshot_dir(tmp_path: Path, name: str) -> Path:
    """Where a browser test leaves its screenshots for review: ``$LEAKFLEET_SCREENSHOTS/name``
    when set (CI keeps them), else the test's temp dir."""
    root = os.environ.get("LEAKFLEET_SCREENSHOTS")
    out = (Path(root) if root else tmp_path / "screenshots") / name
    out.mkdir(parents=True, exist_ok=True)
    return out
