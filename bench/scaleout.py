"""scaleout: several gateways, one broker, one InfluxDB: what deploy/scale-out.md describes.

``gateways`` gateways (distinct ids, their own journals, started as a user starts them) poll
their share of ``stations`` farm stations (lf-mbtcp, one result per 10 s each) and forward to
one Mosquitto and one InfluxDB, for ``seconds``. A subscriber counts the MQTT results. Then the
farm stops publishing, the gateways drain and stop, and every published result must be in its
gateway's journal, in InfluxDB and on MQTT exactly once (by ``record_id``). Reported: per
gateway its CPU share and RSS, the broker's and the database's CPU and RSS, and the dashboard's
first-page time on that InfluxDB.

It starts the servers with the test suite's helpers (``tests/support``): run it from the
repository root, ``.venv/bin/python -m bench --only scaleout``.
"""

from __future__ import annotations

import asyncio
import json
import os
import signal
import sqlite3
import subprocess
import sys
import tempfile
import time
from pathlib import Path
from typing import Any

from bench.modbus import REPO, Farm, _config, _cpu_s, _rss_kb, _wait_online

PERIOD_S = 10.0


def _gateway_config(i: int, ports: list[int], tmp: Path, mqtt_url: str, influx_url: str) -> str:
    text = _config(ports, f"sqlite:///{tmp / f'gw{i}.db'}").replace(
        'gateway_id = "bench-gw"', f'gateway_id = "bench-gw{i}"').replace(
        'poll_interval = "1 s"', 'poll_interval = "2 s"').replace(
        'id = "B', f'id = "G{i}-B').replace('line = "L1"', f'line = "L{i}"')
    return text + (f'\n[sinks.mqtt]\nurl = "{mqtt_url}"\nclient_id = "bench-gw{i}"\n'
                   f'\n[sinks.influxdb]\nurl = "{influx_url}"\n')


async def _count_mqtt(port: int, seen: set[str], ready: asyncio.Event,
                      stop: asyncio.Event) -> None:
    import aiomqtt

    async with aiomqtt.Client("127.0.0.1", port, identifier="scaleout-sub") as client:
        await client.subscribe("leakfleet/+/+/+/result", qos=1)
        ready.set()
        while not stop.is_set():
            try:
                async with asyncio.timeout(0.5):
                    msg = await anext(client.messages)
            except TimeoutError:
                continue
            seen.add(json.loads(bytes(msg.payload))["record_id"])


def _usage(pid: int, cpu0: float, t0: float) -> dict[str, float]:
    rss, hwm = _rss_kb(pid)
    return {"cpu": round((_cpu_s(pid) - cpu0) / (time.monotonic() - t0), 3),
            "rss_mb": round(rss / 1024, 1), "peak_rss_mb": round(hwm / 1024, 1)}


async def _run(gateways: int, stations: int, seconds: float, tmp: Path) -> dict[str, Any]:
    from tests.support.servers import InfluxServer, MosquittoServer

    broker = MosquittoServer(tmp / "mqtt")
    influx = InfluxServer(tmp / "influx")
    broker.start()
    influx.start()
    influx.create_database("plant")
    farm = Farm(stations, PERIOD_S)
    procs: list[subprocess.Popen[bytes]] = []
    seen: set[str] = set()
    ready, stop = asyncio.Event(), asyncio.Event()
    counter = asyncio.create_task(_count_mqtt(broker.port, seen, ready, stop))
    try:
        await ready.wait()
        share = stations // gateways
        for i in range(gateways):
            ports = farm.ports[i * share:(i + 1) * share]
            cfg = tmp / f"gw{i}.toml"
            cfg.write_text(_gateway_config(i, ports, tmp, broker.url, influx.url("plant")))
            log = (tmp / f"gw{i}.log").open("wb")
            procs.append(subprocess.Popen(
                [sys.executable, "-m", "gateway", "gateway", "--config", str(cfg)],
                cwd=REPO, stdout=subprocess.DEVNULL, stderr=log,
                env={**os.environ, "PYTHONPATH": str(REPO)}))
        for i, proc in enumerate(procs):
            await asyncio.to_thread(_wait_online, tmp / f"gw{i}.log", share, proc, 120.0)
        pids = {f"gateway {i}": p.pid for i, p in enumerate(procs)}
        pids["mosquitto"] = broker._proc.pid  # type: ignore[union-attr]
        pids["influxd"] = influx._proc.pid  # type: ignore[union-attr]
        cpu0 = {k: _cpu_s(pid) for k, pid in pids.items()}
        t0 = time.monotonic()
        await asyncio.sleep(seconds)
        usage = {k: _usage(pid, cpu0[k], t0) for k, pid in pids.items()}
        published = farm.freeze()
        await asyncio.sleep(3 * 2.0 + 5.0)  # the last polls and the sinks' last passes
        for proc in procs:
            proc.send_signal(signal.SIGTERM)
        for proc in procs:
            await asyncio.to_thread(proc.wait, 60)
        await asyncio.sleep(1.0)
    finally:
        stop.set()
        await counter
        for proc in procs:
            if proc.poll() is None:
                proc.kill()
        farm.stop()
        rows = influx.query("plant", "SELECT count(leak_rate_sccm) FROM leak_results")
        ids = influx.query("plant", "SELECT record_id FROM leak_results")
        broker.stop()
        influx.stop()
    journal_ids: list[str] = []
    for i in range(gateways):
        with sqlite3.connect(tmp / f"gw{i}.db") as c:
            journal_ids += [r[0] for r in c.execute("SELECT record_id FROM results")]
    # cycles 1..n per station (the first was in the ring before the gateways started and is
    # read at first contact)
    expected = sum(published[: share * gateways])
    influx_ids = [r["record_id"] for r in ids]
    return {
        "gateways": gateways, "stations": share * gateways,
        "results_published": expected,
        "journalled": len(journal_ids), "journal_duplicates": len(journal_ids)
        - len(set(journal_ids)),
        "influxdb_points": int(rows[0]["count"]) if rows else 0,
        "influxdb_distinct": len(set(influx_ids)),
        "mqtt_distinct": len(seen),
        "lost": expected - len(set(journal_ids)),
        "missing_in_influxdb": len(set(journal_ids) - set(influx_ids)),
        "missing_on_mqtt": len(set(journal_ids) - seen),
        "usage": usage,
    }


def run(gateways: int, stations: int, seconds: float) -> dict[str, Any]:
    with tempfile.TemporaryDirectory() as tmp:
        out = asyncio.run(_run(gateways, stations, seconds, Path(tmp)))
    return {
        **out,
        "target": {"lost": 0, "journal_duplicates": 0, "missing_in_influxdb": 0,
                   "missing_on_mqtt": 0},
        "inputs": {"gateways": gateways, "stations": stations, "result_period_s": PERIOD_S,
                   "poll_interval_s": 2.0, "seconds": seconds, "sinks": "mqtt + influxdb",
                   "farm": "one process of lf-mbtcp pymodbus servers (bench/farm.py)",
                   "measured": "CPU share and RSS from /proc over the run"},
    }  # fmt: skip
