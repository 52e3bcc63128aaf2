"""End to end: the annex line's five station types, each connected by its built-in profile alone.

The simulator runs the ``annex`` scenario with its faults on (garbage, cut and repeated lines,
Modbus exceptions, torn slots, dropped links, slow answers); the gateway runs as its own
process, is stopped with SIGTERM half way and started again. Then every result and
calibration the types' profiles read must be in the journal exactly once with the values the
stations sent, nothing else:

* lf-semi (decimal comma, split date/time, no limits or times sent): the reject limit, lower
  limit and times come from the config's program sheet and are marked as supplied by it;
* lf-noclock and lf-mbnoclk (no clock): the record's time is the gateway's, marked as such;
* lf-mbinput: its 16-bit counter wraps 65535 -> 0 during the run and the result numbered 0
  is kept; the acknowledge register holds a cycle the gateway took;
* lf-mblast: the station never overwrites a result the gateway has not taken, so nothing
  waits in the station at the end;
* lf-ticket: two stations on one line, each asked by its address, framed tickets with a block
  check; a ticket changed in transit is quarantined and taken right at the next query;
* four stations are power-cycled once (their counters start again from 1; lf-mbinput's ring
  is empty after it) and every record before and after is there.
"""

from __future__ import annotations

import asyncio
import dataclasses
import os
import signal
import sqlite3
import sys
from pathlib import Path
from typing import Any

import pytest

from sim.scenario import Scenario, load_scenario
from sim.servers.modbus_more import MbInputServer, MbLastServer
from tests.support.journal_check import compare, config_for_plant, read_journal, station_types
from tests.support.sim import running_plant

pytestmark = [pytest.mark.e2e, pytest.mark.timeout(240)]

REPO = Path(__file__).resolve().parents[2]
SPEED = 60.0
HALF_S = float(os.environ.get("LF_E2E_SIMULATED_S", 3600.0)) / 2  # simulated s per half
DOWN_S = 0.8  # wall s the gateway is away: less than lf-mbinput's ring holds (4 cycles)
LATEST_ONLY = ("lf-mbnoclk", "lf-ticket")


def _gaps(db: Path) -> list[dict[str, Any]]:
    conn = sqlite3.connect(f"file:{db}?mode=ro", uri=True)
    conn.row_factory = sqlite3.Row
    try:
        return [dict(r) for r in conn.execute("SELECT station, first, last, source FROM gaps")]
    finally:
        conn.close()


async def _start(cfg: Path, log: Path) -> asyncio.subprocess.Process:
    err = log.open("ab")
    try:
        return await asyncio.create_subprocess_exec(
            sys.executable, "-m", "gateway", "gateway", "--config", str(cfg),
            cwd=REPO, stdout=asyncio.subprocess.DEVNULL, stderr=err,
            env={**os.environ, "PYTHONPATH": str(REPO)},
        )
    finally:
        err.close()


async def _online(log: Path, stations: list[str], proc: asyncio.subprocess.Process,
                  seen: int) -> None:
    async with asyncio.timeout(90):
        while True:
            text = log.read_text(errors="replace") if log.exists() else ""
            if all(text.count(f"{s}: start -> online") > seen for s in stations):
                return
            if proc.returncode is not None:
                raise AssertionError(f"gateway exited early:\n{text[-3000:]}")
            await asyncio.sleep(0.05)


async def _stop(proc: asyncio.subprocess.Process) -> int:
    if proc.returncode is None:
        proc.send_signal(signal.SIGTERM)
    return await asyncio.wait_for(proc.wait(), 30)


def _scaled(speed: float) -> Scenario:
    """Wall-clock faults shrunk with the speed, as in test_sim_to_journal: at 60x a 0.3 s torn
    gap is 18 simulated seconds, longer than any reader waits for a slot to settle (slow
    answers and torn slots at their real size are tested in tests/integration)."""
    scenario = load_scenario("annex")
    scale = 60.0 / speed / 40.0
    return dataclasses.replace(scenario, stations=tuple(
        dataclasses.replace(s, faults=dataclasses.replace(
            s.faults, slow_delay_s=s.faults.slow_delay_s * scale,
            torn_gap_s=s.faults.torn_gap_s * scale))
        for s in scenario.stations))


async def test_annex_types_arrive_complete_across_a_restart(tmp_path: Path) -> None:
    scenario = _scaled(SPEED)
    names = [s.name for s in scenario.stations]
    db = tmp_path / "journal.db"
    log = tmp_path / "gateway.log"
    async with running_plant(scenario, tmp_path, speed=SPEED, faults=True) as plant:
        cfg = tmp_path / "gateway.toml"
        cfg.write_text(config_for_plant(
            plant, f"sqlite:///{db}", poll={t: "0.03 s" for t in
                                            ("lf-mbinput", "lf-mblast", "lf-mbnoclk",
                                             "lf-ticket")},
            timeout="0.5 s",
        ))
        proc = await _start(cfg, log)
        try:
            await _online(log, names, proc, 0)
            t0 = len(plant.truth.entries)
            await asyncio.sleep(HALF_S / SPEED)
            t1 = len(plant.truth.entries)
            rc1 = await _stop(proc)
            await asyncio.sleep(DOWN_S)
            proc = await _start(cfg, log)
            await _online(log, names, proc, 1)
            t2 = len(plant.truth.entries)
            await asyncio.sleep(HALF_S / SPEED)
            t3 = len(plant.truth.entries)
            await asyncio.sleep(1.0)  # the pollers' last rounds
        finally:
            rc2 = await _stop(proc)
        truth = list(plant.truth.entries)
        servers = plant._servers
        mbinput = next(s for s in servers.values() if isinstance(s, MbInputServer))
        mblast = next(s for s in servers.values() if isinstance(s, MbLastServer))
        acknowledged, queued = mbinput.acknowledged, mblast.queued
    text = log.read_text(errors="replace")
    assert rc1 == 0 and rc2 == 0, text[-3000:]
    assert "Traceback" not in text, text[-3000:]

    types = station_types(plant)
    # while the gateway was away (stopped, starting again), a station that keeps only its
    # newest record (lf-mbnoclk's block, lf-ticket's tickets) overwrote the older ones: only
    # its newest of each kind can still be read; the ring, the queue and the streams (for
    # whoever listens) lose nothing
    newest: dict[tuple[str, str], dict[str, Any]] = {}
    away = []
    for e in truth[t1:t2]:
        if types.get(e["station"]) in LATEST_ONLY:
            newest[(e["station"], e["kind"])] = e
        else:
            away.append(e)
    required = truth[t0:t1] + away + list(newest.values()) + truth[t2:t3]
    journal = read_journal(db)
    sheet = {name: p for name, p in scenario.programs.items()}
    for e in required:  # what the program sheet supplies is part of what must arrive
        if e["kind"] == "result" and types[e["station"]] == "lf-semi":
            p = sheet[e["reported"]["program"]]
            e["reported"].update(reject_limit_sccm=p.reject_limit_sccm,
                                 lower_limit_sccm=p.lower_limit_sccm, fill_s=p.fill_s,
                                 stabilise_s=p.stabilise_s, test_s=p.test_s)
    # the journal's extra rows from the restart window are checked against all of truth
    report = compare(truth, journal, types, required=required)
    # a station that keeps only its newest record loses those it ran while its line was down
    # (the device server of the ticket line drops it); each such loss must be on record as a
    # gap in the journal, never silent
    gaps = _gaps(db)
    # and a ring holds 4 results: a restart that takes longer than that (a loaded machine)
    # overwrites some, which the gateway must record as a gap too
    restarting = {(e["station"], e["reported"].get("cycle")) for e in truth[t1:t2]
                  if e["kind"] == "result"}
    on_record = [e for e in report.missing
                 if (types[e["station"]] in LATEST_ONLY
                     or (types[e["station"]] == "lf-mbinput"
                         and (e["station"], e["reported"].get("cycle")) in restarting))
                 and e["kind"] == "result" and any(
                     g["station"] == e["station"]
                     and g["first"] <= e["reported"]["cycle"] <= g["last"] for g in gaps)]
    report.missing = [e for e in report.missing if e not in on_record]
    assert report.ok, report.summary()
    # the power-cycled stations' counters started again, and nothing was lost over it
    for station in ("L3-S1", "L3-S3", "L3-S4", "L3-S6"):
        cycles = [r["cycle"] for r in journal["results"] if r["station"] == station]
        back = [i for i in range(1, len(cycles)) if cycles[i] < cycles[i - 1]
                and not (cycles[i - 1] == 65535 and cycles[i] == 0)]  # lf-mbinput's wrap
        assert len(back) == 1 and cycles[back[0]] <= 3, (station, cycles[:60])
    per_type = {t: sum(1 for e in required if types[e["station"]] == t and e["kind"] == "result")
                for t in set(types.values())}
    assert all(n >= 20 for n in per_type.values()), per_type
    assert report.quarantine_unexplained == [], report.summary()
    assert report.garbage > 0

    results = journal["results"]
    semi = [r for r in results if types[r["station"]] == "lf-semi"]
    assert semi and all(r["reject_limit_sccm"] is not None for r in semi)
    assert {r["time_source"] for r in results if types[r["station"]] in
            ("lf-noclock", "lf-mbnoclk")} == {"gateway"}
    assert {r["time_source"] for r in results if types[r["station"]] in
            ("lf-semi", "lf-mbinput", "lf-mblast")} == {"station"}
    wrapped = [r["cycle"] for r in results if types[r["station"]] == "lf-mbinput"]
    assert 65535 in wrapped and 0 in wrapped and wrapped.count(0) == 1, wrapped[:12]
    assert acknowledged is not None and acknowledged in wrapped
    assert queued <= 1  # the block's own result may still wait for its last poll
