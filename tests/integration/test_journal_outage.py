"""The journal fills up mid-run: nothing is lost, and storing resumes when space returns.

"Disk full" is made real with SQLite's own limit: ``PRAGMA max_page_count`` set to the file's
current size makes every insert fail with SQLITE_FULL, exactly as a full disk does.
"""

from __future__ import annotations

import asyncio
import logging
import tomllib
from pathlib import Path
from typing import Any

import pytest

pytest.importorskip("gateway.store", reason="the journal (gateway.store) has not landed yet")

from gateway.config import parse_config
from gateway.runtime import JournalWriter, Runtime
from tests.sim.small_plant import BASE
from tests.support.journal_check import compare, config_for_plant, read_journal, station_types
from tests.support.sim import running_plant, scenario_from_text

pytestmark = [pytest.mark.integration, pytest.mark.timeout(90)]


def _limit(journal: Any, full: bool) -> None:
    conn = journal._conn  # test-only: reach the journal's connection to cap its size
    pages = conn.execute("PRAGMA page_count").fetchone()[0]
    conn.execute(f"PRAGMA max_page_count = {pages if full else 2**30}")


async def test_disk_full_holds_records_and_resumes(
    tmp_path: Path, caplog: pytest.LogCaptureFixture
) -> None:
    from gateway.store import open_journal

    caplog.set_level(logging.INFO, logger="gateway.runtime")
    db = tmp_path / "journal.db"
    async with running_plant(scenario_from_text(BASE), tmp_path, speed=120) as plant:
        config = parse_config(
            tomllib.loads(config_for_plant(plant, f"sqlite:///{db}")), "gateway.toml"
        )
        writer = JournalWriter(lambda: open_journal(f"sqlite:///{db}"), max_delay_s=0.05,
                               retry_initial_s=0.05, retry_max_s=0.1)
        runtime = Runtime(config, writer=writer)
        stop = asyncio.Event()
        task = asyncio.create_task(runtime.run(stop))
        async with asyncio.timeout(20):
            while not runtime.targets or any(t.health.last_success is None
                                             for t in runtime.targets):
                await asyncio.sleep(0.02)
        t0 = len(plant.truth.entries)
        await asyncio.sleep(0.5)
        await writer.call(_limit, True)
        async with asyncio.timeout(10):
            while writer.accepting:
                await asyncio.sleep(0.01)
        await asyncio.sleep(0.5)  # full for a while: results pile up in memory and rings
        stored_while_full = len(read_journal(db)["results"])
        await asyncio.sleep(0.2)
        assert len(read_journal(db)["results"]) == stored_while_full  # really nothing stored
        await writer.call(_limit, False)
        async with asyncio.timeout(10):
            while not writer.accepting:
                await asyncio.sleep(0.01)
        await asyncio.sleep(1.0)
        t1 = len(plant.truth.entries)
        await asyncio.sleep(0.5)
        stop.set()
        await asyncio.wait_for(task, 30)
        truth = list(plant.truth.entries)
    report = compare(truth, read_journal(db), station_types(plant), required=truth[t0:t1])
    assert report.ok, report.summary()
    failed = [r for r in caplog.records if "journal write failed" in r.getMessage()]
    assert len(failed) == 1 and "disk full" in failed[0].getMessage()  # one clear error
    assert any("journal writable again" in r.getMessage() for r in caplog.records)
    assert writer.stats["failed_writes"] >= 1
