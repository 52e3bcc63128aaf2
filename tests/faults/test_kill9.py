"""kill -9 of the gateway while results stream in, then a restart: nothing lost, nothing doubled.

A small plant (one station of each type) runs fast; the gateway process is killed with SIGKILL
(no shutdown code runs, the journal may be mid-transaction), restarted on the same journal, and
the journal is then compared with the simulator's truth log. Polled stations keep their records
(the Modbus rings hold 8; the restarted reader re-reads them, the unique key drops repeats), so
from them nothing may be missing. Two losses are in the nature of the stations, not the gateway,
and are allowed explicitly: a streaming lf-delim line that reached the killed process but was
not committed yet (the station never resends), and an lf-kv result replaced by the next one
while no gateway was running (that station only ever shows its latest).
"""

from __future__ import annotations

import asyncio
import signal
import sqlite3
from pathlib import Path
from typing import Any

import pytest

from tests.faults.gw import Gateway
from tests.sim.small_plant import BASE
from tests.support.journal_check import compare, config_for_plant, read_journal, station_types
from tests.support.sim import running_plant, scenario_from_text

pytestmark = [pytest.mark.integration, pytest.mark.timeout(150)]
SPEED = 20.0


def _key(e: dict[str, Any]) -> tuple[Any, ...]:
    r = e["reported"]
    return (e["kind"], e["station"], r.get("cycle"), r.get("program"), str(r["ended_at"]))


async def _grown(entries: list[Any], n: int, timeout: float = 60.0) -> None:
    """At least 3 s more and until the truth log holds ``n`` entries: a loaded machine runs the
    simulator slower, and the test needs enough records on each side of the kill."""
    await asyncio.sleep(3.0)
    loop = asyncio.get_running_loop()
    deadline = loop.time() + timeout
    while len(entries) < n and loop.time() < deadline:
        await asyncio.sleep(0.1)


async def test_kill_9_mid_batch_then_restart(tmp_path: Path) -> None:
    db = tmp_path / "journal.db"
    async with running_plant(scenario_from_text(BASE), tmp_path, speed=SPEED) as plant:
        cfg = tmp_path / "gateway.toml"
        cfg.write_text(config_for_plant(plant, f"sqlite:///{db}"))
        names = [s.name for s in plant.scenario.stations]
        gw = Gateway(cfg, tmp_path / "gateway.log")
        try:
            await gw.start()
            await gw.wait_for_text("-> online", len(names))
            t_online = len(plant.truth.entries)
            await _grown(plant.truth.entries, t_online + 12)
            t_pre = len(plant.truth.entries)  # lines from here on may be in the killed batch
            await asyncio.sleep(0.35)
            assert gw.proc is not None
            gw.proc.send_signal(signal.SIGKILL)
            await gw.proc.wait()
            t_kill = len(plant.truth.entries)
            await asyncio.sleep(1.0)  # about 8 simulated cycles: rings (depth 8) still hold them
            gw2 = Gateway(cfg, tmp_path / "gateway2.log")
            await gw2.start()
            await gw2.wait_for_text("-> online", len(names))
            t_back = len(plant.truth.entries)
            await _grown(plant.truth.entries, t_back + 12)
            t_end = len(plant.truth.entries)
            await asyncio.sleep(1.0)
            assert await gw2.stop() == 0, gw2.text()[-2000:]
        finally:
            await gw.ensure_dead()
        truth = list(plant.truth.entries)
        types = station_types(plant)

    assert gw.proc.returncode == -signal.SIGKILL
    journal = read_journal(db)
    report = compare(truth, journal, types, required=truth[t_online:t_end])
    # nothing doubled, nothing invented, every stored value equal to what the station sent
    assert not report.mismatched and not report.extra, report.summary()
    allowed = {
        _key(e) for i, e in enumerate(truth)
        if (types[e["station"]] == "lf-delim" and t_pre <= i < t_kill)
        or (types[e["station"]] == "lf-kv" and t_pre <= i < t_back)
    }  # fmt: skip
    unexplained = [e for e in report.missing if _key(e) not in allowed]
    assert not unexplained, report.summary()
    lost = len(report.missing)
    assert report.expected > 20 and lost <= len(allowed), report.summary()
    # the restart re-read Modbus rings: repeats were dropped by the unique key, not stored twice
    conn = sqlite3.connect(db)
    assert conn.execute("PRAGMA integrity_check").fetchone()[0] == "ok"
    for table, key in (("results", "station, cycle, ended_at"),
                       ("calibrations", "station, program, ended_at")):
        dup = conn.execute(
            f"SELECT COUNT(*) FROM (SELECT 1 FROM {table} GROUP BY {key} HAVING COUNT(*) > 1)"
        ).fetchone()[0]
        assert dup == 0, table
    conn.close()
