"""modbus_poll and rss_mb: the gateway against a farm of simulated lf-mbtcp stations.

``poll_ratio``: time for the gateway's ring reader (``RingReader.poll`` over ``PymodbusLink``,
exactly as the bus task calls it) to detect and read one new result, against a raw pymodbus
client issuing the same register reads (recorded from the reader, replayed) with no decoding.
Both run in this process against one farm station in another process, interleaved in blocks.

``capacity``: the real gateway (``python -m gateway gateway --config ...``, a subprocess) with
N stations polled at 1 Hz, each producing a result every ``period`` s. A step passes when every
result the farm published is in the journal exactly once, no gap was reported, and the p99
detection latency (received_at − ended_at; ended_at has 1 s resolution) is ≤ 2 s, i.e. the
stations really were polled about once a second. The gateway's resident memory is sampled
during the same run (``rss_mb`` uses the 200-station step).
"""

from __future__ import annotations

import asyncio
import json
import os
import signal
import sqlite3
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path
from typing import Any

REPO = Path(__file__).resolve().parents[1]
LATENCY_LIMIT_S = 2.0


def _log(msg: str) -> None:
    print(f"[bench] {msg}", file=sys.stderr, flush=True)


class Farm:
    """The station farm subprocess (bench/farm.py)."""

    def __init__(self, stations: int, period: float, initial: int = 1) -> None:
        self.proc = subprocess.Popen(
            [sys.executable, "-m", "bench.farm", "--stations", str(stations),
             "--period", str(period), "--initial", str(initial)],
            cwd=REPO, stdout=subprocess.PIPE, text=True,
            env={**os.environ, "PYTHONPATH": str(REPO)},
        )  # fmt: skip
        assert self.proc.stdout is not None
        line = self.proc.stdout.readline()
        if not line:
            raise RuntimeError("station farm did not start")
        self.ports: list[int] = json.loads(line)["ports"]

    def freeze(self) -> list[int]:
        """Stop publishing (keep serving); the newest cycle per station."""
        assert self.proc.stdout is not None
        self.proc.send_signal(signal.SIGUSR1)
        published: list[int] = json.loads(self.proc.stdout.readline())["published"]
        return published

    def stop(self) -> dict[str, Any]:
        self.proc.send_signal(signal.SIGTERM)
        out, _ = self.proc.communicate(timeout=60)
        return json.loads(out.strip().splitlines()[-1]) if out.strip() else {}

    def kill(self) -> None:
        if self.proc.poll() is None:
            self.proc.kill()
            self.proc.wait(10)


# -- detect + read latency against raw pymodbus -----------------------------------------------
class _Recording:
    def __init__(self, link: Any) -> None:
        self.link = link
        self.reads: list[tuple[int, int, int]] = []

    async def read(self, function: int, address: int, count: int, device_id: int) -> list[int]:
        self.reads.append((function, address, count))
        result: list[int] = await self.link.read(function, address, count, device_id)
        return result

    async def write(self, address: int, values: list[int], device_id: int) -> None:
        raise AssertionError("the reader must not write")


async def _poll_ratio(port: int, iterations: int, block: int = 50) -> dict[str, Any]:
    from pymodbus.client import AsyncModbusTcpClient

    from gateway.drivers.modbus import PymodbusLink, RingReader
    from gateway.profiles import StationContext, load_profile

    profile = load_profile("lf-mbtcp")
    assert profile.modbus is not None
    ctx = StationContext(station="B1", line="L1", programs={1: "HX-210"})
    reader = RingReader("B1", profile.label, profile.modbus, ctx)
    link = PymodbusLink(f"tcp://127.0.0.1:{port}", timeout=2.0)
    await link.connect()
    raw = AsyncModbusTcpClient("127.0.0.1", port=port, timeout=2.0, retries=0)
    await raw.connect()
    rec = _Recording(link)
    reader.seen = 2
    first = await reader.poll(rec)
    assert first.accepted == 1, first
    reads = rec.reads

    async def ours() -> float:
        reader.seen = 2  # cycle 3 is new again: detect it, read it, check it, decode it
        t = time.perf_counter()
        out = await reader.poll(link)
        elapsed = time.perf_counter() - t
        assert out.accepted == 1
        return elapsed

    async def baseline() -> float:
        t = time.perf_counter()
        for _function, address, count in reads:
            rr = await raw.read_holding_registers(address, count=count, device_id=1)
            assert not rr.isError()
        return time.perf_counter() - t

    for _ in range(20):  # warm up both paths
        await ours()
        await baseline()
    a: list[float] = []
    b: list[float] = []
    while len(a) < iterations:
        a += [await ours() for _ in range(block)]
        b += [await baseline() for _ in range(block)]
    link.close()
    raw.close()
    ours_ms, base_ms = statistics.median(a) * 1e3, statistics.median(b) * 1e3
    return {
        "ours_ms": round(ours_ms, 3),
        "baseline_ms": round(base_ms, 3),
        "ratio": round(ours_ms / base_ms, 3),
        "reads_per_result": len(reads),
        "registers_per_result": sum(c for _, _, c in reads),
        "iterations": len(a),
    }


def poll_ratio(iterations: int) -> dict[str, Any]:
    farm = Farm(1, period=0, initial=3)
    try:
        return asyncio.run(_poll_ratio(farm.ports[0], iterations))
    finally:
        farm.stop()


# -- how many stations at 1 Hz ----------------------------------------------------------------
def _config(ports: list[int], store: str) -> str:
    lines = [
        'site = "Bench Works"', 'gateway_id = "bench-gw"', 'timezone = "UTC"',
        f'store = "{store}"', "", "[runtime]", 'reconnect_initial = "0.2 s"',
        'reconnect_max = "2 s"', "",
    ]
    for i, port in enumerate(ports):
        lines += [
            "[[stations]]", f'id = "B{i:04d}"', 'line = "L1"', 'profile = "lf-mbtcp"',
            f'endpoint = "tcp://127.0.0.1:{port}"', 'poll_interval = "1 s"', 'timeout = "2 s"',
            'programs = { 1 = "HX-210" }', "",
        ]
    return "\n".join(lines)


def _rss_kb(pid: int) -> tuple[int, int]:
    fields = {}
    with open(f"/proc/{pid}/status") as fh:
        for line in fh:
            key, _, value = line.partition(":")
            if key in ("VmRSS", "VmHWM"):
                fields[key] = int(value.split()[0])
    return fields.get("VmRSS", 0), fields.get("VmHWM", 0)


def capacity_step(n: int, seconds: float, period: float) -> dict[str, Any]:
    """Run the gateway against ``n`` farm stations for ``seconds``; what arrived, how fast."""
    with tempfile.TemporaryDirectory() as tmp:
        db = Path(tmp) / "journal.db"
        farm = Farm(n, period)
        gw: subprocess.Popen[bytes] | None = None
        try:
            cfg = Path(tmp) / "gateway.toml"
            cfg.write_text(_config(farm.ports, f"sqlite:///{db}"))
            log = (Path(tmp) / "gateway.log").open("wb")
            gw = subprocess.Popen(
                [sys.executable, "-m", "gateway", "gateway", "--config", str(cfg)],
                cwd=REPO, stdout=subprocess.DEVNULL, stderr=log,
                env={**os.environ, "PYTHONPATH": str(REPO)},
            )  # fmt: skip
            t_online = _wait_online(Path(tmp) / "gateway.log", n, gw, timeout=60 + n / 10)
            rss: list[int] = []
            t_end = time.monotonic() + seconds
            cpu0 = _cpu_s(gw.pid)
            t_cpu0 = time.monotonic()
            while time.monotonic() < t_end:
                time.sleep(1.0)
                if gw.poll() is not None:
                    raise RuntimeError(f"gateway exited early ({gw.returncode})")
                rss.append(_rss_kb(gw.pid)[0])
            cpu = (_cpu_s(gw.pid) - cpu0) / (time.monotonic() - t_cpu0)
            _, hwm = _rss_kb(gw.pid)
            published = farm.freeze()
            time.sleep(LATENCY_LIMIT_S + 1.0)  # a poller in time reads the last results now
            gw.send_signal(signal.SIGTERM)
            gw.wait(60)
            log.close()
            refused = farm.stop().get("writes_refused", 0)
        finally:
            farm.kill()
            if gw is not None and gw.poll() is None:
                gw.kill()
                gw.wait(10)
        conn = sqlite3.connect(db)
        per_station = dict(conn.execute(
            "SELECT station, COUNT(*) FROM results GROUP BY station").fetchall())
        dups = conn.execute(
            "SELECT COUNT(*) - COUNT(DISTINCT station || '/' || cycle) FROM results").fetchone()[0]
        gaps = conn.execute(
            "SELECT COUNT(*) FROM statuses WHERE detail LIKE 'gap:%'").fetchone()[0]
        lat = sorted(r[0] / 1e6 for r in conn.execute(
            "SELECT received_at - ended_at FROM results WHERE ended_at >= ?",
            (int((t_online + 1.0) * 1e6),)))  # fmt: skip
        conn.close()
    expected = sum(published)
    missing = sum(max(0, c - per_station.get(f"B{i:04d}", 0)) for i, c in enumerate(published))
    p99 = lat[int(0.99 * (len(lat) - 1))] if lat else float("inf")
    ok = missing == 0 and gaps == 0 and dups == 0 and p99 <= LATENCY_LIMIT_S and not refused
    rss_steady = rss[len(rss) // 2 :] or [0]
    return {
        "stations": n, "ok": ok, "published": expected, "missing": missing, "duplicates": dups,
        "gaps": gaps, "writes_refused": refused,
        "latency_p50_s": round(lat[len(lat) // 2], 2) if lat else None,
        "latency_p99_s": round(p99, 2), "rss_mb": round(max(rss_steady) / 1024, 1),
        "rss_hwm_mb": round(hwm / 1024, 1), "gateway_cpu": round(cpu, 2), "seconds": seconds,
    }  # fmt: skip


def _wait_online(log: Path, n: int, proc: subprocess.Popen[bytes], timeout: float) -> float:
    """Wall time (time.time) when every station has reported online once."""
    deadline = time.monotonic() + timeout
    while time.monotonic() < deadline:
        text = log.read_text(errors="replace") if log.exists() else ""
        if text.count("-> online") >= n:
            return time.time()
        if proc.poll() is not None:
            raise RuntimeError(f"gateway exited early:\n{text[-2000:]}")
        time.sleep(0.2)
    raise RuntimeError(f"not every station came online within {timeout:g} s")


def _cpu_s(pid: int) -> float:
    with open(f"/proc/{pid}/stat") as fh:
        parts = fh.read().rsplit(")", 1)[1].split()
    return (int(parts[11]) + int(parts[12])) / os.sysconf("SC_CLK_TCK")


def capacity(steps: list[int], seconds: float, period: float) -> dict[str, Any]:
    results = []
    best = 0
    for n in steps:
        _log(f"modbus_poll: {n} stations at 1 Hz for {seconds:g} s")
        step = capacity_step(n, seconds, period)
        _log(f"  -> {json.dumps(step)}")
        results.append(step)
        if not step["ok"]:
            break
        best = n
    return {"max_stations_1hz": best, "steps": results}
