"""``leakfleet sim`` as a user runs it: endpoints printed, truth written, clean exits."""

from __future__ import annotations

import json
import os
import signal
import subprocess
import sys
from collections import Counter
from pathlib import Path

import pytest

from tests.sim.small_plant import BASE

REPO = Path(__file__).resolve().parents[2]
pytestmark = pytest.mark.timeout(60)


ENV = os.environ | {"PYTHONPATH": str(REPO)}  # so a test can run it from a scratch directory


def _sim(*args: str, cwd: Path = REPO) -> subprocess.CompletedProcess[str]:
    return subprocess.run(
        [sys.executable, "-m", "gateway", "sim", *args],
        cwd=cwd,
        capture_output=True,
        text=True,
        timeout=40,
        env=ENV,
    )


def test_help() -> None:
    out = _sim("--help")
    assert out.returncode == 0 and "--scenario" in out.stdout and "--truth" in out.stdout


def test_bad_scenario_names_file_and_key(tmp_path: Path) -> None:
    bad = tmp_path / "bad.toml"
    bad.write_text(BASE.replace('test_pressure = "350 kPa"', 'test_pressure = "350 furlongs"'))
    out = _sim("--scenario", str(bad))
    assert out.returncode == 2
    assert str(bad) in out.stderr and "programs.HX-210.test_pressure" in out.stderr
    assert "Traceback" not in out.stderr
    missing = _sim("--scenario", str(tmp_path / "nope.toml"))
    assert missing.returncode == 2 and "no such scenario" in missing.stderr


def test_run_prints_endpoints_and_writes_truth(tmp_path: Path) -> None:
    scenario = tmp_path / "plant.toml"
    scenario.write_text(BASE)
    truth = tmp_path / "t.jsonl"
    out = _sim(
        "--scenario",
        str(scenario),
        "--speed",
        "600",
        "--seconds",
        "3",
        "--truth",
        str(truth),
        cwd=tmp_path,
    )
    assert out.returncode == 0, out.stderr
    lines = out.stdout.splitlines()
    assert any(line.startswith("D1") and "127.0.0.1:" in line for line in lines)
    assert any(line.startswith("K1") and "run/sim/K1.tty" in line for line in lines)
    assert lines[-1].startswith("ready:")
    entries = [json.loads(line) for line in truth.read_text().splitlines()]
    kinds = Counter((e["station"], e["kind"]) for e in entries)
    for station in ("D1", "K1", "T1", "R1"):
        assert kinds[(station, "result")] > 0 and kinds[(station, "calibration")] > 0
    assert not (tmp_path / "run" / "sim" / "K1.tty").exists()


def test_sigint_stops_cleanly(tmp_path: Path) -> None:
    scenario = tmp_path / "plant.toml"
    scenario.write_text(BASE)
    proc = subprocess.Popen(
        [sys.executable, "-m", "gateway", "sim", "--scenario", str(scenario)],
        cwd=tmp_path,
        stdout=subprocess.PIPE,
        stderr=subprocess.PIPE,
        text=True,
        env=ENV,
    )
    try:
        assert proc.stdout is not None
        for line in proc.stdout:
            if line.startswith("ready:"):
                break
        proc.send_signal(signal.SIGINT)
        assert proc.wait(timeout=15) == 0
    finally:
        if proc.poll() is None:
            proc.kill()
            proc.wait()
