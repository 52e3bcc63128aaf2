"""mqtt_latency: a result's way from the gateway to a subscriber on a real Mosquitto.

The gateway (subprocess, as a user runs it) polls ``stations`` farm stations (bench/farm.py) at
1 Hz and forwards its journal with the MQTT sink to a Mosquitto started here on a free loopback
port; a subscriber in this process takes every ``.../result`` message and measures
``arrival − received_at`` (the gateway's own receive time, carried in the payload: stamped
when the station's counter showed the result, so it includes the poll's slot and consistency
reads, the journal commit and the forwarder's pass). Both clocks are this machine's.

The limit beside it is a bare aiomqtt client in a process of its own that replays the same
arrivals (offsets and payload sizes) through the same broker at QoS 1. The broker runs with
``set_tcp_nodelay true`` (as deploy/mosquitto/mosquitto.conf); ``nodelay=False`` shows
Mosquitto's default, whose Nagle delays put one result in ten of a burst 25-50 ms late.
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
                     arrivals: list[tuple[float, int]] | None = None) -> list[float]:
    """Latencies (s) of every message on ``topic``; ``arrivals`` gets each message's
    ``received_at`` (epoch s) and payload size, the pattern the bare client replays."""
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
            body = bytes(msg.payload)
            payload = json.loads(body)
            received = datetime.fromisoformat(payload["received_at"])
            lat.append((now - received).total_seconds())
            if arrivals is not None:
                arrivals.append((received.timestamp(), len(body)))
    return lat


def _start_broker(mosquitto: str, port: int, workdir: Path, *, nodelay: bool
                  ) -> subprocess.Popen[bytes]:
    """Mosquitto on a loopback listener; ``nodelay`` is its ``set_tcp_nodelay`` (default off)."""
    conf = workdir / "mosquitto.conf"
    conf.write_text(f"listener {port} 127.0.0.1\nallow_anonymous true\n"
                    f"set_tcp_nodelay {'true' if nodelay else 'false'}\n")
    return subprocess.Popen([mosquitto, "-c", str(conf)], stdout=subprocess.DEVNULL,
                            stderr=subprocess.DEVNULL)  # fmt: skip


def run(stations: int, seconds: float, poll_interval_s: float | None, *,
        nodelay: bool = True) -> dict[str, Any]:
    mosquitto = shutil.which("mosquitto") or "/usr/sbin/mosquitto"
    if not os.path.exists(mosquitto):
        return {"missing": "mosquitto is not installed (Debian package mosquitto)"}
    port = _free_port()
    broker_dir = tempfile.TemporaryDirectory()
    broker = _start_broker(mosquitto, port, Path(broker_dir.name), nodelay=nodelay)
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

            arrivals: list[tuple[float, int]] = []

            async def measure() -> list[float]:
                ready = asyncio.Event()
                return await _subscribe(port, seconds, ready, arrivals=arrivals)

            lat = sorted(asyncio.run(measure()))
            bare = bare_client(port, arrivals)
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
        broker_dir.cleanup()
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
        "broker_tcp_nodelay": nodelay,
    }


def _pct(values: list[float], q: float) -> float:
    return values[int(q * (len(values) - 1))]


def _ratio(ours: float, bare: Any) -> float | None:
    return round(ours / bare, 2) if isinstance(bare, int | float) and bare > 0 else None


async def _bare_publish(port: int, arrivals: list[tuple[float, int]]) -> None:
    """The limit: one bare client publishing each message at QoS 1 the moment it arrives.

    ``arrivals`` is the gateway's own run as the subscriber saw it (``received_at`` and payload
    size per result), replayed at the same offsets with the same sizes; each publish is a task
    of its own, as the sink's are, so a message never waits for an earlier one's PUBACK.
    """
    import aiomqtt

    from gateway.sinks.mqtt import MAX_INFLIGHT

    order = sorted(arrivals)
    first = order[0][0]
    loop = asyncio.get_running_loop()
    async with aiomqtt.Client("127.0.0.1", port, identifier="bench-bare",
                              max_inflight_messages=MAX_INFLIGHT) as client:
        start = loop.time()
        async with asyncio.TaskGroup() as tg:
            for i, (at, size) in enumerate(order):
                await asyncio.sleep(max(0.0, start + (at - first) - loop.time()))
                head = json.dumps({"received_at": datetime.now(UTC).isoformat(), "n": i,
                                   "pad": ""})
                body = head[:-2] + "x" * max(0, size - len(head)) + head[-2:]
                tg.create_task(client.publish(f"bare/s{i % 1000}/result", body, qos=1))


def _bare_process(port: int, arrivals: list[tuple[float, int]]) -> None:
    asyncio.run(_bare_publish(port, arrivals))


def bare_client(port: int, arrivals: list[tuple[float, int]]) -> dict[str, Any]:
    """p50/p99 of a bare aiomqtt publisher (its own process) through the same broker, measured
    by the same subscriber the same way (arrival minus the time the message was made)."""
    import multiprocessing

    if not arrivals:
        return {"missing": "nothing to replay: no result reached the subscriber"}
    ctx = multiprocessing.get_context("spawn")
    seconds = max(a for a, _ in arrivals) - min(a for a, _ in arrivals)

    async def measure() -> list[float]:
        ready = asyncio.Event()
        sub = asyncio.create_task(_subscribe(port, seconds + 2.0, ready, topic="bare/+/result"))
        await ready.wait()
        proc = ctx.Process(target=_bare_process, args=(port, arrivals))
        proc.start()
        try:
            return await sub
        finally:
            await asyncio.to_thread(proc.join, 30)

    lat = sorted(asyncio.run(measure()))
    if not lat:
        return {"missing": "no bare message reached the subscriber"}
    sizes = sorted(size for _, size in arrivals)
    return {"p50_ms": round(_pct(lat, 0.5) * 1e3, 2), "p99_ms": round(_pct(lat, 0.99) * 1e3, 2),
            "messages": len(lat), "payload_bytes_median": sizes[len(sizes) // 2],
            "arrivals": "replayed from the gateway's run (received_at offsets, sizes)"}
