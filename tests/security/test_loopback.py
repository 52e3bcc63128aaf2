"""The gateway's endpoints (Prometheus metrics) and the dashboard listen on loopback only.

Checked from the outside: the listening TCP sockets a process owns (``/proc/<pid>/fd`` matched
with ``/proc/net/tcp`` and ``tcp6``), whatever the code meant to do.
"""

from __future__ import annotations

import asyncio
import importlib.util
import os
import signal
import socket
import subprocess
import sys
from pathlib import Path

import pytest

from tests.faults.gw import Gateway
from tests.support.http import wait_healthy

pytestmark = [pytest.mark.integration, pytest.mark.timeout(60)]
REPO = Path(__file__).resolve().parents[2]
LOOPBACK = {"127.0.0.1", "::1", "::ffff:127.0.0.1"}


def _listening(pid: int) -> list[tuple[str, int]]:
    inodes = set()
    for fd in os.listdir(f"/proc/{pid}/fd"):
        try:
            target = os.readlink(f"/proc/{pid}/fd/{fd}")
        except OSError:
            continue
        if target.startswith("socket:["):
            inodes.add(target[8:-1])
    out = []
    for table, family in (("/proc/net/tcp", socket.AF_INET), ("/proc/net/tcp6", socket.AF_INET6)):
        with open(table) as fh:
            next(fh)
            for row in fh:
                cols = row.split()
                if cols[3] != "0A" or cols[9] not in inodes:  # 0A = LISTEN
                    continue
                hex_addr, hex_port = cols[1].split(":")
                raw = bytes.fromhex(hex_addr)
                # /proc prints each 32-bit word in host (little-endian) order
                raw = b"".join(raw[i : i + 4][::-1] for i in range(0, len(raw), 4))
                out.append((socket.inet_ntop(family, raw), int(hex_port, 16)))
    return out


def _free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return int(s.getsockname()[1])


async def test_gateway_listens_on_loopback_only(tmp_path: Path) -> None:
    port = _free_port()
    cfg = tmp_path / "gateway.toml"
    cfg.write_text(
        f'site = "Northmere Works"\nstore = "sqlite:///{tmp_path / "j.db"}"\n'
        f"[metrics]\nprometheus_port = {port}\n"
        '[[stations]]\nid = "L1-S1"\nline = "L1"\nprofile = "lf-delim"\n'
        'endpoint = "tcp://127.0.0.1:9"\n'
    )
    gw = Gateway(cfg, tmp_path / "gateway.log")
    try:
        await gw.start()
        await gw.wait_for_text("gateway ", timeout=30)
        await asyncio.sleep(1.5)
        assert gw.proc is not None and gw.proc.returncode is None, gw.text()
        sockets = _listening(gw.proc.pid)
    finally:
        await gw.stop()
        await gw.ensure_dead()
    assert all(addr in LOOPBACK for addr, _ in sockets), sockets
    if importlib.util.find_spec("gateway.metrics") is not None:
        assert (("127.0.0.1", port) in sockets), sockets  # the metrics endpoint is up, on loopback


def _tree(pid: int) -> list[int]:
    """``pid`` and its descendants (``leakfleet dashboard`` runs Streamlit as a child)."""
    out, todo = [], [pid]
    while todo:
        p = todo.pop()
        out.append(p)
        for task in os.listdir(f"/proc/{p}/task"):
            with open(f"/proc/{p}/task/{task}/children") as fh:
                todo += [int(c) for c in fh.read().split()]
    return out


def test_dashboard_listens_on_loopback_only(tmp_path: Path) -> None:
    from gateway.store import open_journal

    db = tmp_path / "j.db"
    open_journal(f"sqlite:///{db}").close()
    port = _free_port()
    proc = subprocess.Popen(
        [sys.executable, "-m", "gateway", "dashboard", "--store", f"sqlite:///{db}",
         "--port", str(port)],
        cwd=REPO, stdout=subprocess.PIPE, stderr=subprocess.STDOUT, text=True,
        env={**os.environ, "PYTHONPATH": str(REPO)},
    )  # fmt: skip
    try:
        wait_healthy(port, proc)
        sockets = [s for pid in _tree(proc.pid) for s in _listening(pid)]
    finally:
        proc.send_signal(signal.SIGINT)
        proc.communicate(timeout=20)
    assert ("127.0.0.1", port) in sockets, sockets
    assert all(addr in LOOPBACK for addr, _ in sockets), sockets
