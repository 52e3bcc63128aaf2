"""The journal's disk fills up or turns read-only under a running gateway, then recovers.

Real conditions, not a stand-in (root only; skipped otherwise). "Full": the journal lives on a
small tmpfs mounted for the test, filled with a file until the kernel says ENOSPC. "Read-only":
the journal's files are made immutable (``chattr +i``), so every write the open journal makes
fails with EPERM, as on a filesystem gone read-only (a remount would be refused while the
journal holds its files open for writing). While it lasts, the gateway must say so clearly
(once) and keep polling its stations: none goes offline, and Modbus stations keep their
results in their rings while the gateway stops taking them. Once space returns it stores
everything: the journal is compared with the simulator's truth, and SQLite's own
``PRAGMA integrity_check`` must pass.
"""

from __future__ import annotations

import asyncio
import contextlib
import errno
import os
import sqlite3
import subprocess
from collections.abc import Iterator
from pathlib import Path

import pytest

from tests.faults.gw import Gateway
from tests.sim.small_plant import BASE
from tests.support.journal_check import compare, config_for_plant, read_journal, station_types
from tests.support.sim import running_plant, scenario_from_text

pytestmark = [pytest.mark.integration, pytest.mark.timeout(150)]
SPEED = 20.0  # the rings (lf-mbrtu depth 4, a cycle ~25 s) hold 5 s of wall time


@pytest.fixture
def small_fs(tmp_path: Path) -> Iterator[Path]:
    if os.geteuid() != 0:
        pytest.skip("mounting a small tmpfs needs root")
    mnt = tmp_path / "mnt"
    mnt.mkdir()
    run = subprocess.run(["mount", "-t", "tmpfs", "-o", "size=16m", "tmpfs", str(mnt)],
                         capture_output=True, text=True)  # fmt: skip
    if run.returncode != 0:
        pytest.skip(f"cannot mount a tmpfs here: {run.stderr.strip()}")
    try:
        yield mnt
    finally:
        subprocess.run(["mount", "-o", "remount,rw", str(mnt)], capture_output=True)
        subprocess.run(["umount", "-l", str(mnt)], capture_output=True)


def _fill(mnt: Path) -> Path:
    """Write a file until the filesystem is full (unbuffered, so ENOSPC surfaces here)."""
    filler = mnt / "filler.bin"
    fd = os.open(filler, os.O_WRONLY | os.O_CREAT | os.O_TRUNC)
    try:
        chunk = b"\0" * 65536
        while True:
            try:
                os.write(fd, chunk)
            except OSError as exc:
                assert exc.errno == errno.ENOSPC, exc
                if len(chunk) == 1:
                    return filler
                chunk = chunk[: len(chunk) // 2]
    finally:
        os.close(fd)


def _immutable(db: Path, on: bool) -> None:
    # not the -shm index: it is memory-mapped, and a read-only filesystem could not have been
    # remounted under a live shared mapping anyway (an immutable one makes the process SIGBUS)
    for path in (db, Path(f"{db}-wal")):
        if path.exists():
            subprocess.run(["chattr", "+i" if on else "-i", str(path)], check=True)


@pytest.mark.parametrize("mode", ["full", "readonly"])
async def test_journal_outage_then_recovery(mode: str, small_fs: Path, tmp_path: Path) -> None:
    db = small_fs / "journal.db" if mode == "full" else tmp_path / "ext" / "journal.db"
    if mode == "readonly":
        db.parent.mkdir()
        probe = db.parent / "probe"
        probe.touch()
        if subprocess.run(["chattr", "+i", str(probe)], capture_output=True).returncode != 0:
            pytest.skip("chattr +i is not supported on this filesystem")
        subprocess.run(["chattr", "-i", str(probe)], check=True)
    async with running_plant(scenario_from_text(BASE), tmp_path, speed=SPEED) as plant:
        cfg = tmp_path / "gateway.toml"
        cfg.write_text(config_for_plant(
            plant, f"sqlite:///{db}",
            runtime='reconnect_initial = "0.05 s"\nreconnect_max = "0.5 s"\nline_gap = "0.05 s"',
        ))  # fmt: skip
        names = [s.name for s in plant.scenario.stations]
        gw = Gateway(cfg, tmp_path / "gateway.log")
        try:
            await gw.start()
            await gw.wait_for_text("-> online", len(names))
            t_online = len(plant.truth.entries)
            await asyncio.sleep(2.0)
            if mode == "full":
                filler = await asyncio.to_thread(_fill, small_fs)
            else:
                _immutable(db, True)
            await gw.wait_for_text("journal write failed", timeout=20)
            await asyncio.sleep(2.0)  # the outage: stations keep being polled
            if mode == "full":
                filler.unlink()
            else:
                _immutable(db, False)
            await gw.wait_for_text("journal writable again", timeout=40)
            await asyncio.sleep(2.0)
            t_end = len(plant.truth.entries)
            await asyncio.sleep(1.0)
            rc = await gw.stop()
        finally:
            await gw.ensure_dead()
            if mode == "readonly":
                _immutable(db, False)
        truth = list(plant.truth.entries)
        types = station_types(plant)
    log = gw.text()
    assert rc == 0, log[-3000:]
    assert "Traceback" not in log, log[-3000:]
    errors = [line for line in log.splitlines() if "journal write failed" in line]
    assert len(errors) == 1, errors  # said once, clearly, with the reason
    words = ["full"] if mode == "full" else ["not permitted", "readonly", "read-only", "i/o"]
    assert any(w in errors[0].lower() for w in words), errors[0]
    assert "-> offline" not in log, log[-3000:]  # kept polling every station
    report = compare(truth, read_journal(db), types, required=truth[t_online:t_end])
    assert report.ok, report.summary()
    assert report.expected > 15, report.summary()
    with contextlib.closing(sqlite3.connect(db)) as conn:
        assert conn.execute("PRAGMA integrity_check").fetchone()[0] == "ok"
