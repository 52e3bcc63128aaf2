"""``[runtime] retention``: the running gateway prunes journal rows older than the retention,
and only those every enabled sink has confirmed (a sink that is down keeps its backlog)."""

from __future__ import annotations

import asyncio
import sqlite3
import tomllib
from datetime import UTC, datetime, timedelta
from pathlib import Path

import pytest

from gateway.config import parse_config
from gateway.runtime import Runtime
from gateway.store import open_journal
from tests.integration.sinks_data import result
from tests.support.servers import free_port

pytestmark = [pytest.mark.integration, pytest.mark.timeout(60)]


def _config(tmp_path: Path, db: Path, sink: str = "") -> str:
    return f"""
site = "Northmere Works"
gateway_id = "gw-ret"
timezone = "Europe/Berlin"
store = "sqlite:///{db}"

[runtime]
retention = "30 d"
{sink}
[[stations]]
id = "L1-S1"
line = "L1"
profile = "lf-delim"
endpoint = "tcp://127.0.0.1:{free_port()}"
"""


def _fill(db: Path) -> None:
    now = datetime.now(UTC)
    def at(i: int, days: int) -> dict[str, datetime]:
        t = now - timedelta(days=days, minutes=i)
        return {"ended_at": t, "received_at": t + timedelta(seconds=1)}

    old = [result("L1-S1", i, **at(i, 40)) for i in range(1, 6)]
    new = [result("L1-S1", i, **at(i, 2)) for i in range(6, 9)]
    with open_journal(f"sqlite:///{db}") as j:
        j.write(old + new)


async def _run_briefly(text: str, tmp_path: Path, seconds: float) -> None:
    config = parse_config(tomllib.loads(text), str(tmp_path / "gateway.toml"))
    stop = asyncio.Event()
    task = asyncio.create_task(Runtime(config).run(stop))
    await asyncio.sleep(seconds)
    stop.set()
    await asyncio.wait_for(task, 30)


def _cycles(db: Path) -> list[int]:
    with sqlite3.connect(db) as conn:
        return sorted(r[0] for r in conn.execute("SELECT cycle FROM results"))


async def test_old_rows_go_new_rows_stay(tmp_path: Path) -> None:
    db = tmp_path / "journal.db"
    _fill(db)
    await _run_briefly(_config(tmp_path, db), tmp_path, 1.5)
    assert _cycles(db) == [6, 7, 8]
    with sqlite3.connect(db) as conn:  # the summaries describe what is left
        assert conn.execute("SELECT SUM(n) FROM result_hours").fetchone()[0] == 3


async def test_a_sink_that_has_nothing_yet_keeps_everything(tmp_path: Path) -> None:
    db = tmp_path / "journal.db"
    _fill(db)
    down = f'\n[sinks.mqtt]\nurl = "mqtt://127.0.0.1:{free_port()}"\nconnect_timeout_s = 0.5\n'
    await _run_briefly(_config(tmp_path, db, down), tmp_path, 1.5)
    assert _cycles(db) == [1, 2, 3, 4, 5, 6, 7, 8]
