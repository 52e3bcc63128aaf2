"""catchup: a sink that was down for an hour at 500 stations drains its backlog, live traffic on.

A journal holds the hour a sink missed: 500 stations at one result per 10 s (180 000 results;
``--quick`` half an hour). Our sink's forwarder then drains it to a real Mosquitto and to a
real InfluxDB while a writer keeps adding the live plant's results (50 per second) to the same
journal. Beside each drain, its limit: a bare client of the same library writing the same
records in the same batch sizes through the same server (MQTT: aiomqtt at QoS 1, every PUBACK
of a batch awaited, as the forwarder does; InfluxDB: the same line-protocol body POSTed with
the standard library's HTTP client). Figures: drain seconds, the ratio bare ÷ ours (target
≥ 0.7) and the live results' journal → broker latency during the drain.

It starts the servers with the test suite's helpers (``tests/support``), so it runs from the
repository root: ``.venv/bin/python -m bench --only catchup``.
"""

from __future__ import annotations

import asyncio
import json
import logging
import statistics
import tempfile
import threading
import time
import urllib.request
from datetime import UTC, datetime, timedelta
from pathlib import Path
from typing import Any

from gateway.records import TestResult, Verdict

STATIONS = 500
PERIOD_S = 10.0
BATCH = 500
T0 = datetime(2026, 11, 30, 6, tzinfo=UTC)


def _record(i: int, cycle: int, at: datetime) -> TestResult:
    leak = 0.05 + (cycle * 7919 + i) % 1000 / 500.0
    return TestResult(
        station=f"S{i:03d}", line=f"L{i // 50}", cycle=cycle, ended_at=at, received_at=at,
        program="HX-210", verdict=Verdict.PASS if leak < 2 else Verdict.REJECT,
        test_pressure_pa=350_000.0, pressure_loss_pa=leak * 21.0, leak_rate_sccm=leak,
        reject_limit_sccm=2.0, fill_s=3.0, stabilise_s=8.0, test_s=10.0,
        part_id=f"HX210-{cycle:06d}", raw=f"R;{cycle};{leak:.3f}", profile="lf-delim@1.0",
    )  # fmt: skip


def backlog(minutes: float) -> list[TestResult]:
    """The records of ``minutes`` of the plant, in time order."""
    rounds = int(minutes * 60 / PERIOD_S)
    return [_record(i, k + 1, T0 + timedelta(seconds=k * PERIOD_S + i * PERIOD_S / STATIONS))
            for k in range(rounds) for i in range(STATIONS)]


def _journal(path: Path, records: list[TestResult]) -> None:
    from gateway.store import open_journal

    with open_journal(f"sqlite:///{path}") as j:
        for k in range(0, len(records), 5000):
            j.write(records[k:k + 5000])


class _Live:
    """The plant going on: 50 results a second into the journal, each write's time kept."""

    def __init__(self, path: Path) -> None:
        self.path = path
        self.written: dict[str, float] = {}
        self._stop = threading.Event()
        self._thread = threading.Thread(target=self._run, name="live plant", daemon=True)

    def _run(self) -> None:
        from gateway.store import open_journal

        cycle = 10_000_000
        with open_journal(f"sqlite:///{self.path}") as j:
            while not self._stop.is_set():
                now = datetime.now(UTC)
                batch = [_record(i, cycle, now) for i in range(0, STATIONS, 100)]  # 5 / 0.1 s
                j.write(batch)
                t = time.monotonic()
                for r in batch:
                    self.written[r.record_id] = t
                cycle += 1
                self._stop.wait(0.1)

    def __enter__(self) -> _Live:
        self._thread.start()
        return self

    def __exit__(self, *exc: object) -> None:
        self._stop.set()
        self._thread.join(10)


async def _drain(fwd: Any, path: Path, total: int) -> tuple[float, int]:
    """Seconds until the sink confirmed the whole backlog (seqs 1..total; live ones follow)."""
    from gateway.store import open_journal

    stop = asyncio.Event()
    with open_journal(f"sqlite:///{path}") as j:
        t = time.monotonic()
        task = asyncio.create_task(fwd.run_with(j, stop))
        while j.get_cursor(fwd.name, "result") < total:
            if task.done():
                task.result()
                raise RuntimeError(f"sink {fwd.name} stopped early")
            await asyncio.sleep(0.02)
        seconds = time.monotonic() - t
        await asyncio.sleep(1.0)  # the live records written meanwhile go out too
        stop.set()
        await asyncio.wait_for(task, 60)
    return seconds, fwd.sent.get("result", 0)


async def _mqtt_ours(url: str, path: Path, total: int, live: _Live, port: int
                     ) -> dict[str, Any]:
    import aiomqtt

    from gateway.sinks import SinkContext
    from gateway.sinks.mqtt import make_mqtt

    arrivals: dict[str, float] = {}
    ready = asyncio.Event()

    async def listen() -> None:
        async with aiomqtt.Client("127.0.0.1", port, identifier="catchup-sub") as client:
            # only the live plant's stations: a subscriber taking the whole backlog (90 000
            # messages in a few seconds, each decoded) falls behind the broker itself, and its
            # own lag would be counted as the gateway's
            for i in range(0, STATIONS, 100):
                await client.subscribe(f"bench/+/+/s{i:03d}/result", qos=0)
            ready.set()
            async for msg in client.messages:
                if not str(msg.topic).endswith("/result"):
                    continue  # the gateway's own state ("online") is not a record
                arrivals[json.loads(bytes(msg.payload))["record_id"]] = time.monotonic()

    listener = asyncio.create_task(listen())
    await ready.wait()
    ctx = SinkContext(site="bench", gateway_id="catchup", store_url="", stations={})
    fwd = make_mqtt("mqtt", {"url": url, "batch_size": BATCH, "topic_prefix": "bench",
                             "kinds": ["result"]}, ctx)
    seconds, sent = await _drain(fwd, path, total)
    await asyncio.sleep(1.0)
    listener.cancel()
    lat = sorted(arrivals[r] - t for r, t in live.written.items() if r in arrivals)
    return {"seconds": round(seconds, 2), "records": sent,
            "live_delivered": len(lat),
            "live_p50_ms": round(1000 * statistics.median(lat), 1) if lat else None,
            "live_p99_ms": round(1000 * lat[int(0.99 * (len(lat) - 1))], 1) if lat else None}


async def _mqtt_bare(port: int, records: list[TestResult]) -> float:
    """The same records written by a bare client: serialised and published batch by batch."""
    import aiomqtt

    quiet = logging.getLogger("bench.catchup.bare")  # its "pending publish calls" chatter
    quiet.setLevel(logging.ERROR)
    async with aiomqtt.Client("127.0.0.1", port, identifier="catchup-bare",
                              logger=quiet) as client:
        t = time.monotonic()
        for k in range(0, len(records), BATCH):
            async with asyncio.TaskGroup() as tg:
                for r in records[k:k + BATCH]:
                    body = json.dumps(r.to_dict(), separators=(",", ":")).encode()
                    tg.create_task(client.publish(f"bare/{r.line}/{r.station}/result", body,
                                                  qos=1))
        return time.monotonic() - t


def _influx_bare(base_url: str, db: str, records: list[TestResult]) -> float:
    from gateway.influxdb.lineprotocol import encode

    t = time.monotonic()
    for k in range(0, len(records), BATCH):
        body = encode(list(enumerate(records[k:k + BATCH], start=k)), site="bench").encode()
        req = urllib.request.Request(f"{base_url}/write?db={db}&precision=ns", data=body,
                                     method="POST")
        with urllib.request.urlopen(req, timeout=60) as resp:
            assert resp.status == 204
    return time.monotonic() - t


async def _run(minutes: float, tmp: Path) -> dict[str, Any]:
    from gateway.sinks import SinkContext
    from gateway.sinks.influx import make_influx
    from tests.support.servers import InfluxServer, MosquittoServer

    records = backlog(minutes)
    total = len(records)
    out: dict[str, Any] = {}
    broker = MosquittoServer(tmp / "mqtt")
    influx = InfluxServer(tmp / "influx")
    broker.start()
    influx.start()
    try:
        path = tmp / "mqtt.db"
        _journal(path, records)
        with _Live(path) as live:
            ours = await _mqtt_ours(broker.url, path, total, live, broker.port)
        bare = await _mqtt_bare(broker.port, records)
        out["mqtt"] = {"ours": ours, "bare_s": round(bare, 2),
                       "ratio": round(bare / ours["seconds"], 2)}
        path = tmp / "influx.db"
        _journal(path, records)
        influx.create_database("ours")
        influx.create_database("bare")
        # the journal named, as a gateway's sink has it: the part summaries go out too
        ctx = SinkContext(site="bench", gateway_id="catchup", store_url=f"sqlite:///{path}",
                          stations={})
        fwd = make_influx("influx", {"url": influx.url("ours"), "batch_size": BATCH,
                                     "kinds": ["result"]}, ctx)
        with _Live(path):
            seconds, sent = await _drain(fwd, path, total)
        bare_s = await asyncio.to_thread(_influx_bare, influx.base_url, "bare", records)
        out["influxdb"] = {"ours": {"seconds": round(seconds, 2), "records": sent},
                           "bare_s": round(bare_s, 2), "ratio": round(bare_s / seconds, 2)}
    finally:
        broker.stop()
        influx.stop()
    return out


def run(minutes: float) -> dict[str, Any]:
    with tempfile.TemporaryDirectory() as tmp:
        figures = asyncio.run(_run(minutes, Path(tmp)))
    return {
        **figures,
        "target": {"ratio": ">= 0.7 (bare client's drain time / ours)"},
        "inputs": {"stations": STATIONS, "result_period_s": PERIOD_S,
                   "outage_minutes": minutes, "backlog_records": int(minutes * 60 / PERIOD_S)
                   * STATIONS, "batch_size": BATCH, "live_results_per_s": 50,
                   "mqtt_qos": 1, "bare_mqtt": "aiomqtt, same payloads, batches of 500, "
                   "every PUBACK awaited", "bare_influx": "urllib POST /write, same body"},
    }  # fmt: skip
