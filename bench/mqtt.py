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


async def _subscribe(port: int, seconds: float, ready: asyncio.Event) -> list[float]:
    import aiomqtt

    lat: list[float] = []
    async with aiomqtt.Client("127.0.0.1", port, identifier="bench-sub") as client:
        await client.subscribe("leakfleet/+/+/+/result", qos=1)
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

            async def measure() -> list[float]:
                ready = asyncio.Event()
                return await _subscribe(port, seconds, ready)

            lat = sorted(asyncio.run(measure()))
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
    return {
        "p50_ms": round(lat[len(lat) // 2] * 1e3, 1),
        "p99_ms": round(lat[int(0.99 * (len(lat) - 1))] * 1e3, 1),
        "messages": len(lat),
        "forwarder_poll_interval_s": poll_interval_s if poll_interval_s is not None else 0.5,
    }
