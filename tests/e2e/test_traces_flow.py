"""End to end: stations sending pressure curves, the gateway collecting them, the back-down report.

A small plant of two curve-sending types runs at high speed: lf-delim sends a line of samples
after each result and after each calibration's two tests; lf-mbtcp keeps the newest result's
curve in registers behind its own counter. The program runs a long cycle (the trade's advice:
start long, calibrate, then back the times down) and calibrates often, so one run holds enough
master and master-plus-standard curves for ``leakfleet report backdown``. Checked: every curve a
station sent while the gateway was up is in the journal once, tied to its result (same time,
same program), its loss over the test window equal to the result's loss (one transducer), and
the report, run as a user would, names a shortest cycle no longer than the recorded one.
"""

from __future__ import annotations

import asyncio
import json
import os
import signal
import subprocess
import sys
from pathlib import Path

import pytest

from gateway.store import open_journal
from gateway.store.traces import traces
from sim.scenario import loads_scenario
from tests.support.journal_check import config_for_plant, read_journal
from tests.support.sim import running_plant, wait_online

pytestmark = [pytest.mark.e2e, pytest.mark.timeout(240)]

REPO = Path(__file__).resolve().parents[2]
SPEED = 120.0
SIMULATED_S = 1.5 * 3600.0

SCENARIO = """
site = "Northmere Works"
timezone = "Europe/Berlin"
seed = 7

[lines.L9]
name = "Trial bench"

[populations.good]
good_median = "0.05 sccm"
good_sigma = 0.5
reject_fraction = 0.05
reject_range = [1.2, 4.0]
gross_fraction = 0.0
abort_fraction = 0.0
retest_fraction = 0.0
part_offset_mean_k = 0.2
part_offset_sd_k = 0.3

[programs.LONG]
volume = "250 cc"
test_pressure = "350 kPa"
fill = "3 s"
stabilise = "20 s"
test = "20 s"
reject_limit = "2 sccm"
standard = { serial = "LS-9", flow = "3 sccm", reference_pressure = "350 kPa" }
calibration_interval = 2
ratio_min = 1.5
population = "good"
fill_heating_k = 0.8
thermal_tau = "2.5 s"

[[stations]]
name = "L9-S1"
line = "L9"
type = "lf-delim"
port = 0
programs = ["LONG"]
trace_interval = "0.1 s"
load = ["2 s", "4 s"]
pause_probability = 0.0

[[stations]]
name = "L9-S2"
line = "L9"
type = "lf-mbtcp"
port = 0
programs = { 1 = "LONG" }
trace_interval = "0.1 s"
load = ["2 s", "4 s"]
pause_probability = 0.0
"""


def _window_loss(trace) -> float:  # type: ignore[no-untyped-def]
    at = dict(trace.phases)
    i0 = round(at["test"] / trace.sample_interval_s)
    i1 = round(at["dump"] / trace.sample_interval_s)
    return trace.pressures_pa[i0] - trace.pressures_pa[i1]


async def test_curves_arrive_tied_to_their_results_and_feed_the_backdown_report(
    tmp_path: Path,
) -> None:
    scenario = loads_scenario(SCENARIO, "traces-e2e")
    db = tmp_path / "journal.db"
    log = tmp_path / "gateway.log"
    async with running_plant(scenario, tmp_path, speed=SPEED) as plant:
        cfg = tmp_path / "gateway.toml"
        cfg.write_text(config_for_plant(plant, f"sqlite:///{db}", poll={"lf-mbtcp": "0.03 s"},
                                        traces=True))
        with log.open("wb") as err:
            proc = await asyncio.create_subprocess_exec(
                sys.executable, "-m", "gateway", "gateway", "--config", str(cfg),
                cwd=REPO, stdout=asyncio.subprocess.DEVNULL, stderr=err,
                env={**os.environ, "PYTHONPATH": str(REPO)},
            )
            try:
                await wait_online(log, ["L9-S1", "L9-S2"], proc)
                t0 = len(plant.truth.entries)
                await asyncio.sleep(SIMULATED_S / SPEED)
                t1 = len(plant.truth.entries)
                await asyncio.sleep(1.0)
            finally:
                if proc.returncode is None:
                    proc.send_signal(signal.SIGTERM)
                rc = await asyncio.wait_for(proc.wait(), 30)
        truth = list(plant.truth.entries)[t0:t1]
    text = log.read_text(errors="replace")
    assert rc == 0 and "Traceback" not in text, text[-3000:]

    sent = {(e["station"], c["role"], c["cycle"]) for e in truth for c in e.get("traces", [])}
    assert {r for _, r, _ in sent} == {"result", "master", "standard"}
    journal = read_journal(db)
    assert journal["quarantine"] == []  # every curve line was read as one
    with open_journal(f"sqlite:///{db}") as j:
        got = {st: traces(j, st, limit=10_000) for st in ("L9-S1", "L9-S2")}
        gaps = j._query("SELECT station, source FROM gaps", (), "reading gaps")
    assert gaps == []  # the gateway read every curve before the station overwrote it
    stored = [t for ts in got.values() for t in ts]
    keys = [(t.station, t.role, t.cycle) for t in stored]
    assert len(keys) == len(set(keys))  # each curve once
    missing = sent - set(keys)
    assert not missing, sorted(missing)[:5]
    results = {(r["station"], r["cycle"]): r for r in journal["results"]}
    for t in stored:
        if t.role != "result" or (t.station, t.cycle) not in results:
            continue
        r = results[(t.station, t.cycle)]
        assert t.time_source == "station" and t.program == r["program"] == "LONG"
        assert t.ended_at == r["ended_at"]
        # the curve and the result come from one transducer: the window's loss is the loss
        # (within the 0.1 Pa the line prints samples with, and the 0.1 Pa of the result)
        assert _window_loss(t) == pytest.approx(r["pressure_loss_pa"], abs=0.25)
    masters = [t for t in got["L9-S1"] if t.role == "master"]
    assert len(masters) >= 10

    report = subprocess.run(
        [sys.executable, "-m", "gateway", "report", "backdown", "--store", f"sqlite:///{db}",
         "--station", "L9-S1", "--json"],
        cwd=REPO, capture_output=True, text=True, timeout=120,
    )
    assert report.returncode == 0, report.stderr
    doc = json.loads(report.stdout)
    assert doc["station"] == "L9-S1" and doc["program"] == "LONG"
    assert doc["n_master"] == len(masters)
    chosen = doc["chosen"]
    assert chosen is not None, doc.get("notes")
    assert chosen["stabilise_s"] + chosen["test_s"] <= 40.0
