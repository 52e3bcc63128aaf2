"""Waiting for a served dashboard (Streamlit's health endpoint) from a test."""

from __future__ import annotations

import subprocess
import time
import urllib.request


def wait_healthy(port: int, proc: subprocess.Popen[str], timeout: float = 45.0) -> None:
    """Until ``/_stcore/health`` answers ``ok``; fails with the process output if it exits."""
    deadline = time.monotonic() + timeout
    while True:
        try:
            with urllib.request.urlopen(f"http://127.0.0.1:{port}/_stcore/health",
                                        timeout=2) as r:  # fmt: skip
                assert r.read() == b"ok"
                return
        except OSError:
            assert proc.poll() is None, proc.stdout.read() if proc.stdout else ""
            assert time.monotonic() < deadline, "dashboard did not answer"
            time.sleep(0.3)
