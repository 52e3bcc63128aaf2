"""Every simulator fault at once across the demo plant, for hours of simulated time.

The ``demo-faults`` plant (link drops, line noise, cut and doubled lines, a clock offset, Modbus
exceptions, slow answers, torn register blocks) runs at 150x for 70 s of wall time (about
3 simulated hours) against the gateway as its own process; wall-clock faults are scaled with
the speed as in tests/e2e. Checks: no task dies (no crash or traceback in the log, every
station still delivers results in the last stretch of the run); what arrived matches the
truth, and a result may only be missing where the gateway reported the gap (a Modbus ring
that overran while the gateway was starved of CPU is flagged, never lost silently); and the
gateway's resident memory grows by at most ``RSS_GROWTH_MB`` from the end of the warm-up
(first quarter) to the end: a bound on every per-station buffer, cache and backlog it keeps.
"""

from __future__ import annotations

import asyncio
import dataclasses
import re
from pathlib import Path
from typing import Any

import pytest

from sim.scenario import Scenario, load_scenario
from tests.faults.gw import Gateway, rss_kb
from tests.support.journal_check import compare, config_for_plant, read_journal, station_types
from tests.support.sim import running_plant

pytestmark = [pytest.mark.e2e, pytest.mark.timeout(240)]
SPEED = 150.0
WALL_S = 70.0
RSS_GROWTH_MB = 12.0


def _scaled(speed: float) -> Scenario:
    scenario = load_scenario("demo-faults")
    scale = 60.0 / speed / 40.0  # as tests/e2e: the demo's wall-clock delays, kept per cycle
    return dataclasses.replace(scenario, stations=tuple(
        dataclasses.replace(s, faults=dataclasses.replace(
            s.faults, slow_delay_s=s.faults.slow_delay_s * scale,
            torn_gap_s=s.faults.torn_gap_s * scale))
        for s in scenario.stations))  # fmt: skip


def _reported_gaps(statuses: list[dict[str, Any]]) -> set[tuple[str, int]]:
    """(station, cycle) of every cycle a "gap: cycles a..b" / "gap: cycle a" status names."""
    out: set[tuple[str, int]] = set()
    for row in statuses:
        found = re.search(r"gap: cycles? (\d+)(?:\.\.(\d+))?", row.get("detail") or "")
        if found:
            lo = int(found.group(1))
            hi = int(found.group(2) or lo)
            out.update((row["station"], c) for c in range(lo, hi + 1))
    return out


async def test_all_faults_for_hours(tmp_path: Path) -> None:
    scenario = _scaled(SPEED)
    db = tmp_path / "journal.db"
    samples: list[int] = []
    async with running_plant(scenario, tmp_path, speed=SPEED, faults=True) as plant:
        cfg = tmp_path / "gateway.toml"
        cfg.write_text(config_for_plant(
            plant, f"sqlite:///{db}",
            poll={"lf-kv": "0.02 s", "lf-mbtcp": "0.03 s", "lf-mbrtu": "0.03 s"},
            timeout="0.5 s",
            runtime='reconnect_initial = "0.05 s"\nreconnect_max = "0.2 s"\nline_gap = "0.05 s"',
        ))  # fmt: skip
        gw = Gateway(cfg, tmp_path / "gateway.log")
        try:
            await gw.start()
            await gw.wait_for_text("-> online", len(scenario.stations))
            assert gw.proc is not None
            t0 = len(plant.truth.entries)
            loop = asyncio.get_running_loop()
            end = loop.time() + WALL_S
            tail_from = 0
            while loop.time() < end:
                await asyncio.sleep(2.0)
                samples.append(rss_kb(gw.proc.pid))
                if end - loop.time() < WALL_S / 10 and not tail_from:
                    tail_from = len(plant.truth.entries)
            t1 = len(plant.truth.entries)
            await asyncio.sleep(1.0)
            rc = await gw.stop()
        finally:
            await gw.ensure_dead()
        truth = list(plant.truth.entries)
        types = station_types(plant)
    log = gw.text()
    assert rc == 0, log[-3000:]
    assert "Traceback" not in log and "crashed" not in log, log[-3000:]
    journal = read_journal(db)
    report = compare(truth, journal, types, required=truth[t0:t1])
    assert not (report.mismatched or report.extra), report.summary()
    gaps = _reported_gaps(journal["statuses"])
    silent = [e for e in report.missing
              if (e["station"], e["reported"].get("cycle")) not in gaps]  # fmt: skip
    assert not silent, report.summary()
    assert len(report.missing) <= report.expected // 50, report.summary()
    simulated_h = (WALL_S * SPEED) / 3600
    assert simulated_h > 2.5 and report.expected > 1000, (simulated_h, report.summary())
    # every station still delivering at the end: no poller or reader died on the way
    stored = {(r["station"], r["cycle"]) for r in journal["results"]}
    late = {e["station"] for e in truth[tail_from:t1]
            if e["kind"] == "result" and (e["station"], e["reported"]["cycle"]) in stored}
    assert late == {s.name for s in scenario.stations}, late
    warm = samples[len(samples) // 4]
    growth_mb = (max(samples[len(samples) // 4 :]) - warm) / 1024
    print(f"gateway RSS {warm / 1024:.1f} MB after warm-up, growth {growth_mb:.1f} MB")
    assert growth_mb <= RSS_GROWTH_MB, (growth_mb, [s // 1024 for s in samples])
