"""chaos: every fault at once for hours of simulated time, and a count of what was lost.

The demo plant with all its faults (link drops, line noise, cut and doubled lines, clock
offsets, Modbus exceptions, slow answers, torn blocks) runs fast against the gateway as its
own process with an MQTT sink on a real Mosquitto; mid-run the broker is stopped for a while
(a sink outage) and the gateway is killed with SIGKILL and started again. At the end the
journal is compared with the simulator's truth:

- ``lost_unrecorded``: results the station produced that are neither in the journal nor
  named by a recorded gap (must be 0);
- ``duplicated``: results stored twice (must be 0; the journal's key forbids it, counted
  anyway), and ``mqtt_unacknowledged``: journalled results the broker never acknowledged
  (QoS 1) by the end, outage and kill included (must be 0).

It reuses the test suite's simulator and journal-checking helpers (``tests/support``), so it
runs from the repository root: ``.venv/bin/python -m bench --only chaos``.
"""

from __future__ import annotations

import asyncio
import dataclasses
import json
import signal
import sqlite3
import tempfile
import time
from pathlib import Path
from typing import Any

SPEED = 120.0


def _scaled(speed: float) -> Any:
    from sim.scenario import load_scenario

    scenario = load_scenario("demo-faults")
    scale = 60.0 / speed / 40.0
    return dataclasses.replace(scenario, stations=tuple(
        dataclasses.replace(s, faults=dataclasses.replace(
            s.faults, slow_delay_s=s.faults.slow_delay_s * scale,
            torn_gap_s=s.faults.torn_gap_s * scale))
        for s in scenario.stations))  # fmt: skip


async def _run(wall_s: float, tmp: Path) -> dict[str, Any]:
    from tests.faults.gw import Gateway
    from tests.support.journal_check import (
        compare,
        config_for_plant,
        read_journal,
        station_types,
    )
    from tests.support.servers import MosquittoServer
    from tests.support.sim import running_plant

    db = tmp / "journal.db"
    scenario = _scaled(SPEED)
    broker = MosquittoServer(tmp / "mqtt")
    broker.__enter__()
    try:
        async with running_plant(scenario, tmp, speed=SPEED, faults=True) as plant:
            cfg = tmp / "gateway.toml"
            text = config_for_plant(
                plant, f"sqlite:///{db}",
                poll={"lf-kv": "0.02 s", "lf-mbtcp": "0.03 s", "lf-mbrtu": "0.03 s"},
                timeout="0.5 s",
                runtime='reconnect_initial = "0.05 s"\nreconnect_max = "0.2 s"\n'
                        'line_gap = "0.05 s"',
            )  # fmt: skip
            head, _, rest = text.partition("[[stations]]")
            cfg.write_text(head + f'[sinks.mqtt]\ntype = "mqtt"\nurl = "{broker.url}"\n\n'
                           + "[[stations]]" + rest)
            gw = Gateway(cfg, tmp / "gateway.log")
            await gw.start()
            await gw.wait_for_text("-> online", len(scenario.stations))
            t0 = len(plant.truth.entries)
            third = wall_s / 3
            await asyncio.sleep(third)
            broker.stop()  # the sink's server goes away for a while
            await asyncio.sleep(third / 2)
            assert gw.proc is not None
            gw.proc.send_signal(signal.SIGKILL)  # and the gateway dies hard meanwhile
            await gw.proc.wait()
            await asyncio.sleep(1.0)
            broker.start()
            gw2 = Gateway(cfg, tmp / "gateway2.log")
            await gw2.start()
            await asyncio.sleep(third * 1.5)
            t1 = len(plant.truth.entries)
            rc = await gw2.stop()
            await gw2.ensure_dead()
            await asyncio.sleep(2.0)
            truth = list(plant.truth.entries)
            types = station_types(plant)
    finally:
        broker.__exit__(None, None, None)
    journal = read_journal(db)
    report = compare(truth, journal, types, required=truth[t0:t1])
    with sqlite3.connect(db) as conn:
        gaps = conn.execute("SELECT station, first, last FROM gaps").fetchall()
        conflicts = conn.execute("SELECT COUNT(*) FROM conflicts").fetchone()[0]
        dups = conn.execute("SELECT COUNT(*) - COUNT(DISTINCT station || '|' || cycle || '|' "
                            "|| ended_at) FROM results").fetchone()[0]
        stored = conn.execute("SELECT COUNT(*) FROM results").fetchone()[0]
        cursor = conn.execute("SELECT COALESCE(MAX(seq), 0) FROM sink_cursors WHERE "
                              "sink = 'mqtt' AND kind = 'result'").fetchone()[0]
        unsent = conn.execute("SELECT COUNT(*) FROM results WHERE seq > ?",
                              (cursor,)).fetchone()[0]
    covered = {(s, c) for s, a, b in gaps for c in range(a, b + 1) if b >= a}
    unrecorded = [e for e in report.missing
                  if (e["station"], e["reported"].get("cycle")) not in covered]
    return {
        "lost_unrecorded": len(unrecorded),
        "duplicated": int(dups),
        "mqtt_unacknowledged": int(unsent),
        "results_sent": report.expected,
        "results_stored": int(stored),
        "missing_but_recorded_as_gap": len(report.missing) - len(unrecorded),
        "mismatched": len(report.mismatched),
        "conflicts": int(conflicts),
        "gaps_recorded": len(gaps),
        "gateway_exit_after_restart": rc,
        "target": {"lost_unrecorded": "== 0", "duplicated": "== 0",
                   "mqtt_unacknowledged": "== 0"},
        "inputs": {"scenario": "demo-faults", "speed": SPEED, "wall_s": wall_s,
                   "simulated_h": round(wall_s * SPEED / 3600, 2),
                   "events": "all simulator faults; broker stopped for a sixth of the run; "
                             "gateway SIGKILLed during the outage and restarted"},
    }


def run(wall_s: float) -> dict[str, Any]:
    t = time.monotonic()
    with tempfile.TemporaryDirectory() as d:
        out = asyncio.run(_run(wall_s, Path(d)))
    out["bench_wall_s"] = round(time.monotonic() - t, 1)
    return out


if __name__ == "__main__":
    print(json.dumps(run(60.0), indent=1))
