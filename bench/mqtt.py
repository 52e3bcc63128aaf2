"""mqtt_latency: a result's way from the gateway to a subscriber on a real Mosquitto.

The gateway (subprocess, as a user runs it) polls ``stations`` farm stations (bench/farm.py) at
1 Hz and forwards its journal with the MQTT sink to a Mosquitto started here on a free loopback
port; a subscriber in this process takes every ``.../result`` message and measures
``arrival − received_at`` (the gateway's own receive time, carried in the payload). That is
the commit-to-subscriber time plus the journal writer's batching delay (≤ 0.1 s), so an upper
bound of the "committed → received" figure. Both clocks are this machine's.
"""

from __future__ import annotations

import asyncio
import json
import os
import shutil
import signal
import socket
import subprocess
import sys
import tempfile
import time
from datetime import UTC, datetime
from pathlib import Path
from typing import Any

from bench.modbus import REPO, Farm, _config, _wait_online


def _free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return int(s.getsockname()[1])


def _wait_port(port: int, timeout: float = 10.0) -> None:
    deadline = time.monotonic() + timeout
    while time.monotonic() < deadline:
        with socket.socket() as s:
            if s.connect_ex(("127.0.0.1", port)) == 0:
                return
        time.sleep(0.05)
    raise RuntimeError(f"mosquitto did not listen on {port}")


async def _subscribe(port: int, seconds: float, ready: asyncio.Event,
                     topic: str = "leakfleet/+/+/+/result",
                     sizes: list[int] | None = None) -> list[float]:
    import aiomqtt

    lat: list[float] = []
    async with aiomqtt.Client("127.0.0.1", port, identifier="bench-sub") as client:
        await client.subscribe(topic, qos=1)
        ready.set()
        loop = asyncio.get_running_loop()
        end = loop.time() + seconds
        while loop.time() < end:
            try:
                async with asyncio.timeout(max(0.1, end - loop.time())):
                    msg = await anext(client.messages)
            except (TimeoutError, StopAsyncIteration):
                break
            now = datetime.now(UTC)
            if sizes is not None:
                sizes.append(len(bytes(msg.payload)))
            payload = json.loads(bytes(msg.payload))
            received = datetime.fromisoformat(payload["received_at"])
            lat.append((now - received).total_seconds())
    return lat


def run(stations: int, seconds: float, poll_interval_s: float | None) -> dict[str, Any]:
    mosquitto = shutil.which("mosquitto") or "/usr/sbin/mosquitto"
    if not os.path.exists(mosquitto):
        return {"missing": "mosquitto is not installed (Debian package mosquitto)"}
    port = _free_port()
    broker = subprocess.Popen([mosquitto, "-p", str(port)], stdout=subprocess.DEVNULL,
                              stderr=subprocess.DEVNULL)  # fmt: skip
    farm: Farm | None = None
    gw: subprocess.Popen[bytes] | None = None
    try:
        _wait_port(port)
        farm = Farm(stations, 2.0)
        with tempfile.TemporaryDirectory() as tmp:
            sink = f'[sinks.mqtt]\ntype = "mqtt"\nurl = "mqtt://127.0.0.1:{port}"\n'
            if poll_interval_s is not None:
                sink += f"poll_interval_s = {poll_interval_s}\n"
            text = _config(farm.ports, f"sqlite:///{Path(tmp) / 'j.db'}")
            head, _, rest = text.partition("[[stations]]")
            cfg = Path(tmp) / "gateway.toml"
            cfg.write_text(head + sink + "\n[[stations]]" + rest)
            log = (Path(tmp) / "gateway.log").open("wb")
            gw = subprocess.Popen(
                [sys.executable, "-m", "gateway", "gateway", "--config", str(cfg)],
                cwd=REPO, stdout=subprocess.DEVNULL, stderr=log,
                env={**os.environ, "PYTHONPATH": str(REPO)},
            )  # fmt: skip
            _wait_online(Path(tmp) / "gateway.log", stations, gw, timeout=60 + stations / 10)
            time.sleep(3.0)  # the first-contact ring reads are old results: let them pass

            sizes: list[int] = []

            async def measure() -> list[float]:
                ready = asyncio.Event()
                return await _subscribe(port, seconds, ready, sizes=sizes)

            lat = sorted(asyncio.run(measure()))
            bare = bare_client(port, stations, result_period_s=2.0, seconds=seconds,
                               payload_bytes=sorted(sizes)[len(sizes) // 2] if sizes else 600)
            gw.send_signal(signal.SIGTERM)
            gw.wait(60)
            log.close()
    finally:
        for proc in (gw, broker):
            if proc is not None and proc.poll() is None:
                proc.kill()
                proc.wait(10)
        if farm is not None:
            farm.kill()
    if not lat:
        return {"missing": "no result reached the subscriber"}
    p50, p99 = _pct(lat, 0.5), _pct(lat, 0.99)
    return {
        "p50_ms": round(p50 * 1e3, 1),
        "p99_ms": round(p99 * 1e3, 1),
        "messages": len(lat),
        "bare_client": bare,
        "ratio_p50": _ratio(p50 * 1e3, bare.get("p50_ms")),
        "ratio_p99": _ratio(p99 * 1e3, bare.get("p99_ms")),
        "forwarder_poll_interval_s": poll_interval_s if poll_interval_s is not None else 0.5,
    }


def _pct(values: list[float], q: float) -> float:
    return values[int(q * (len(values) - 1))]


def _ratio(ours: float, bare: Any) -> float | None:
    return round(ours / bare, 2) if isinstance(bare, int | float) and bare > 0 else None


async def _bare_publish(port: int, stations: int, period_s: float, seconds: float,
                        payload_bytes: int) -> int:
    """The limit: one bare client publishing what the journal would hand over, at QoS 1."""
    import random

    import aiomqtt

    rng = random.Random(7)
    phase = sorted((rng.uniform(0, period_s), i) for i in range(stations))
    filler = "x" * max(0, payload_bytes - 80)
    sent = 0
    loop = asyncio.get_running_loop()
    async with aiomqtt.Client("127.0.0.1", port, identifier="bench-bare",
                              max_inflight_messages=stations) as client:
        start = loop.time()
        k = 0
        while True:
            offset, i = phase[k % stations]
            due = start + (k // stations) * period_s + offset
            if due - start > seconds:
                return sent
            await asyncio.sleep(max(0.0, due - loop.time()))
            body = json.dumps({"received_at": datetime.now(UTC).isoformat(), "station": i,
                               "pad": filler})
            await client.publish(f"bare/s{i}/result", body, qos=1)
            sent += 1
            k += 1


def _bare_process(port: int, stations: int, period_s: float, seconds: float,
                  payload_bytes: int) -> None:
    asyncio.run(_bare_publish(port, stations, period_s, seconds, payload_bytes))


def bare_client(port: int, stations: int, *, result_period_s: float, seconds: float,
                payload_bytes: int) -> dict[str, Any]:
    """p50/p99 of a bare aiomqtt publisher (its own process) through the same broker, measured
    by the same subscriber the same way (arrival minus the time the message was made)."""
    import multiprocessing

    ctx = multiprocessing.get_context("spawn")

    async def measure() -> list[float]:
        ready = asyncio.Event()
        sub = asyncio.create_task(_subscribe(port, seconds + 2.0, ready, topic="bare/+/result"))
        await ready.wait()
        proc = ctx.Process(target=_bare_process,
                           args=(port, stations, result_period_s, seconds, payload_bytes))
        proc.start()
        try:
            return await sub
        finally:
            await asyncio.to_thread(proc.join, 30)

    lat = sorted(asyncio.run(measure()))
    if not lat:
        return {"missing": "no bare message reached the subscriber"}
    return {"p50_ms": round(_pct(lat, 0.5) * 1e3, 2), "p99_ms": round(_pct(lat, 0.99) * 1e3, 2),
            "messages": len(lat), "payload_bytes": payload_bytes}
