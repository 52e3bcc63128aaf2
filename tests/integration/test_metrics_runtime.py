"""The Prometheus endpoint against real stations: what it counts is what the journal holds.

Real peers started here: a pymodbus TCP server holding an lf-mbtcp register image, a TCP line
server streaming lf-delim lines, a TCP request/response server answering lf-kv queries, and a
port nothing listens on. The Runtime runs in this event loop with metrics on a free loopback
port; the endpoint is scraped with urllib and parsed with prometheus-client's own text parser.
"""

from __future__ import annotations

import asyncio
import contextlib
import dataclasses
import socket
import sqlite3
import tomllib
import urllib.error
import urllib.request
import uuid
from collections.abc import AsyncIterator, Callable
from pathlib import Path
from typing import Any

import pytest
from prometheus_client.parser import text_string_to_metric_families
from pymodbus.server import ModbusTcpServer
from pymodbus.simulator import DataType, SimData, SimDevice

from gateway.config import GatewayConfig, parse_config
from gateway.errors import ConfigError
from gateway.runtime import Runtime
from tests.gateway.drivers.station_image import StationImage
from tests.gateway.drivers.test_line_driver import NONE, kv_answer
from tests.integration.test_drivers_real_peers import C1, R1, R2
from tests.support.servers import free_port

pytestmark = [pytest.mark.integration, pytest.mark.timeout(60)]

Samples = dict[tuple[str, frozenset[tuple[str, str]]], float]


# -- real peers -------------------------------------------------------------------------------
@contextlib.asynccontextmanager
async def modbus_station(cycles: int) -> AsyncIterator[int]:
    """A pymodbus TCP server with ``cycles`` results and one calibration in its image."""
    image = StationImage()
    for c in range(1, cycles + 1):
        image.publish(c)
    image.calibrate(1)
    block = [SimData(0, count=600, values=image.regs, datatype=DataType.REGISTERS)]
    bits = [SimData(0, count=1, values=False, datatype=DataType.BITS)]
    server = ModbusTcpServer(SimDevice(id=1, simdata=(bits, bits, block, block)),
                             address=("127.0.0.1", 0))
    await server.serve_forever(background=True)
    try:
        yield int(server.transport.sockets[0].getsockname()[1])  # type: ignore[attr-defined]
    finally:
        await server.shutdown()


@contextlib.asynccontextmanager
async def tcp_server(
    handle: Callable[[asyncio.StreamReader, asyncio.StreamWriter], Any],
) -> AsyncIterator[int]:
    server = await asyncio.start_server(handle, "127.0.0.1", 0)
    try:
        yield int(server.sockets[0].getsockname()[1])
    finally:
        server.close()
        await server.wait_closed()


async def stream_lines(reader: asyncio.StreamReader, writer: asyncio.StreamWriter) -> None:
    """lf-delim: two results, one line of noise (quarantined), one calibration; then silence."""
    writer.write(R1 + b"\r\n" + b"\x93\xffnoise\r\n" + R2 + b"\r\n" + C1 + b"\r\n")
    await writer.drain()
    with contextlib.suppress(ConnectionError):
        await reader.read()  # hold the connection until the gateway closes it
    writer.close()


async def kv_answers(reader: asyncio.StreamReader, writer: asyncio.StreamWriter) -> None:
    """lf-kv: ``?LAST`` answers cycle 1 (the same on every ask), every other query NONE."""
    with contextlib.suppress(ConnectionError, asyncio.IncompleteReadError):
        while True:
            query = await reader.readuntil(b"\r")
            writer.write(kv_answer(1) if query == b"?LAST\r" else NONE)
            await writer.drain()
    writer.close()


# -- gateway ----------------------------------------------------------------------------------
def config(tmp_path: Path, stations: dict[str, tuple[str, str]], metrics: str) -> GatewayConfig:
    text = f'site = "Northmere Works"\nstore = "sqlite:///{tmp_path / "journal.db"}"\n'
    text += "[runtime]\nreconnect_initial = 0.05\nreconnect_max = 0.2\n"
    text += f"[metrics]\n{metrics}\n"
    for sid, (profile, endpoint) in stations.items():
        text += (f'[[stations]]\nid = "{sid}"\nline = "L1"\nprofile = "{profile}"\n'
                 f'endpoint = "{endpoint}"\npoll_interval = 0.05\ntimeout = 0.5\n'
                 'programs = { 1 = "HX-210" }\n')
    return parse_config(tomllib.loads(text), str(tmp_path / "gateway.toml"))


@contextlib.asynccontextmanager
async def running(cfg: GatewayConfig) -> AsyncIterator[Runtime]:
    runtime = Runtime(cfg)
    stop = asyncio.Event()
    task = asyncio.create_task(runtime.run(stop))
    try:
        await until(lambda: bool(runtime.targets) or task.done())  # journal open, buses up
        if task.done():
            task.result()
        yield runtime
    finally:
        stop.set()
        await asyncio.wait_for(task, 30)


async def until(cond: Callable[[], bool], timeout: float = 15.0) -> None:
    async with asyncio.timeout(timeout):
        while not cond():
            await asyncio.sleep(0.02)


def scrape(url: str) -> Samples:
    with urllib.request.urlopen(url, timeout=5) as resp:
        text = resp.read().decode()
    return {
        (s.name, frozenset(s.labels.items())): s.value
        for family in text_string_to_metric_families(text)
        for s in family.samples
    }


def value(samples: Samples, name: str, **labels: str) -> float:
    return samples.get((name, frozenset(labels.items())), 0.0)


def journal_counts(db: Path) -> dict[tuple[str, str], int]:
    """(station, kind) → rows, read with plain sqlite3 from the documented tables."""
    out: dict[tuple[str, str], int] = {}
    with contextlib.closing(sqlite3.connect(f"file:{db}?mode=ro", uri=True)) as conn:
        for table, kind in (("results", "result"), ("calibrations", "calibration"),
                            ("statuses", "status"), ("quarantine", "rejected")):
            for station, n in conn.execute(
                f"SELECT station, COUNT(*) FROM {table} GROUP BY station"
            ):
                out[(station, kind)] = n
    return out


def last_state(db: Path, station: str) -> str:
    with contextlib.closing(sqlite3.connect(f"file:{db}?mode=ro", uri=True)) as conn:
        (state,) = conn.execute(
            "SELECT state FROM statuses WHERE station = ? ORDER BY seq DESC LIMIT 1", (station,)
        ).fetchone()
    return str(state)


def metric_counts(samples: Samples, stations: list[str]) -> dict[tuple[str, str], int]:
    out: dict[tuple[str, str], int] = {}
    for sid in stations:
        for kind in ("result", "calibration", "status"):
            n = value(samples, "leakfleet_records_stored_total", station=sid, kind=kind)
            if n:
                out[(sid, kind)] = int(n)
        n = value(samples, "leakfleet_records_rejected_total", station=sid)
        if n:
            out[(sid, "rejected")] = int(n)
    return out


async def scrape_until_journal_matches(url: str, db: Path, stations: list[str]) -> Samples:
    """Scrape until the stored/rejected counters equal the journal's rows (they must converge
    once the stations have nothing new; a commit may land between journal read and scrape)."""
    seen: list[Any] = []

    def matches() -> bool:
        samples = scrape(url)
        got, want = metric_counts(samples, stations), journal_counts(db)
        want = {k: v for k, v in want.items() if k[0] in stations}
        seen[:] = [samples, got, want]
        return got == want

    with contextlib.suppress(TimeoutError):
        await until(matches, timeout=10)
    assert seen[1] == seen[2], "metrics never matched the journal"
    return seen[0]


# -- tests ------------------------------------------------------------------------------------
async def test_scraped_counters_match_the_journal_also_after_a_restart(tmp_path: Path) -> None:
    tag = uuid.uuid4().hex[:6]  # the registry is process-wide: our own station names
    mb, st, kv, dead = (f"{n}-{tag}" for n in ("MB", "ST", "KV", "DEAD"))
    db = tmp_path / "journal.db"
    port = free_port()
    async with (
        modbus_station(5) as mb_port,
        tcp_server(stream_lines) as st_port,
        tcp_server(kv_answers) as kv_port,
    ):
        cfg = config(tmp_path, {
            mb: ("lf-mbtcp", f"tcp://127.0.0.1:{mb_port}"),
            st: ("lf-delim", f"tcp://127.0.0.1:{st_port}"),
            kv: ("lf-kv", f"tcp://127.0.0.1:{kv_port}"),
            dead: ("lf-delim", f"tcp://127.0.0.1:{free_port()}"),  # nothing listens there
        }, f"prometheus_port = {port}")
        stations = [mb, st, kv, dead]

        def journalled(j: dict[tuple[str, str], int]) -> bool:
            return (j.get((mb, "result")) == 5 and j.get((mb, "calibration")) == 1
                    and j.get((st, "result")) == 2 and j.get((st, "calibration")) == 1
                    and j.get((st, "rejected")) == 1 and j.get((kv, "result")) == 1)

        async with running(cfg) as runtime:
            assert runtime.metrics_server is not None
            url = runtime.metrics_server.url
            assert url == f"http://127.0.0.1:{port}/metrics"
            await until(lambda: db.exists() and journalled(journal_counts(db)))
            samples = await scrape_until_journal_matches(url, db, stations)

            for sid in stations:  # the state series says what the journal's last status says
                state = last_state(db, sid)
                assert value(samples, "leakfleet_station_state", station=sid,
                             leakfleet_station_state=state) == 1.0
            assert last_state(db, dead) == "offline"
            assert value(samples, "leakfleet_station_errors_total", station=dead) >= 1
            assert value(samples, "leakfleet_station_errors_total", station=mb) == 0
            # poll latency: one observation per completed poll round (Modbus, request/response)
            for sid in (mb, kv):
                assert value(samples, "leakfleet_poll_latency_seconds_count", station=sid) >= 1
                assert value(samples, "leakfleet_poll_latency_seconds_sum", station=sid) > 0
            assert value(samples, "leakfleet_poll_latency_seconds_count", station=st) == 0
            # received counts what the drivers handed over, before the journal
            assert value(samples, "leakfleet_records_received_total", station=mb,
                         kind="result") == 5
            assert value(samples, "leakfleet_records_received_total", station=st,
                         kind="rejected") == 1
        with pytest.raises(urllib.error.URLError):  # stopped with the gateway
            scrape(url)

        # Restart on the same journal: the Modbus ring is read once more in full and the
        # stream station sends its lines again; the journal ignores those repeats, so the
        # received counters grow and the stored ones still equal the journal's rows.
        async with running(cfg) as runtime:
            await until(lambda: value(scrape(url), "leakfleet_records_received_total",
                                      station=mb, kind="result") == 10)
            await until(lambda: value(scrape(url), "leakfleet_records_received_total",
                                      station=st, kind="result") == 4)
            samples = await scrape_until_journal_matches(url, db, stations)
        assert value(samples, "leakfleet_records_stored_total", station=mb, kind="result") == 5
        assert value(samples, "leakfleet_records_stored_total", station=st, kind="result") == 2


async def test_sink_backlog_and_errors_while_the_broker_is_unreachable(tmp_path: Path) -> None:
    tag = uuid.uuid4().hex[:6]
    mb, sink = f"MB-{tag}", f"mq_{tag}"
    db = tmp_path / "journal.db"
    async with modbus_station(3) as mb_port:
        cfg = config(tmp_path, {mb: ("lf-mbtcp", f"tcp://127.0.0.1:{mb_port}")},
                     f"prometheus_port = {free_port()}")
        cfg = dataclasses.replace(cfg, sinks={sink: {  # a port nothing listens on
            "type": "mqtt", "url": f"mqtt://127.0.0.1:{free_port()}", "backoff_initial_s": 0.05,
            "backoff_max_s": 0.2, "backlog_interval_s": 0.05, "connect_timeout_s": 1,
        }})
        async with running(cfg) as runtime:
            assert runtime.metrics_server is not None
            url = runtime.metrics_server.url
            # results and the calibration may be committed apart (group commit): wait for both
            await until(lambda: journal_counts(db).get((mb, "result")) == 3
                        and journal_counts(db).get((mb, "calibration")) == 1)

            def backlog_is_journal() -> bool:
                s = scrape(url)
                return (value(s, "leakfleet_sink_backlog_records", sink=sink, kind="result") == 3
                        and value(s, "leakfleet_sink_backlog_records", sink=sink,
                                  kind="calibration") == 1
                        # the first refused connect may come after the backlog is counted
                        and value(s, "leakfleet_sink_errors_total", sink=sink) >= 1)
            await until(backlog_is_journal)  # nothing sent: the whole journal waits
            samples = scrape(url)
        assert value(samples, "leakfleet_sink_errors_total", sink=sink) >= 1
        assert value(samples, "leakfleet_sink_connected", sink=sink) == 0
        assert value(samples, "leakfleet_sink_backlog_records", sink=sink,
                     kind="calibration") == 1


async def test_endpoint_listens_on_127_0_0_1_only_by_default(tmp_path: Path) -> None:
    port = free_port()
    cfg = config(tmp_path, {f"D-{uuid.uuid4().hex[:6]}": ("lf-delim",
                                                           f"tcp://127.0.0.1:{free_port()}")},
                 f"prometheus_port = {port}")
    assert cfg.metrics.bind == "127.0.0.1"
    async with running(cfg) as runtime:
        assert runtime.metrics_server is not None
        assert "leakfleet_records_received" in urllib.request.urlopen(
            f"http://127.0.0.1:{port}/metrics", timeout=5).read().decode()
        # 127.0.0.2 is this machine too (the loopback net is 127/8 on Linux): a wildcard bind
        # would answer there, a 127.0.0.1 bind refuses. Same for IPv6 loopback.
        for family, host in ((socket.AF_INET, "127.0.0.2"), (socket.AF_INET6, "::1")):
            with socket.socket(family, socket.SOCK_STREAM) as s:
                s.settimeout(2)
                try:
                    s.connect((host, port))
                except OSError:
                    continue  # refused (or no IPv6 here): not listening there
                pytest.fail(f"metrics endpoint answers on {host}")


async def test_metrics_off_by_default_and_a_taken_port_is_a_config_error(tmp_path: Path) -> None:
    station = {f"D-{uuid.uuid4().hex[:6]}": ("lf-delim", f"tcp://127.0.0.1:{free_port()}")}
    async with running(config(tmp_path, station, "")) as runtime:
        await until(lambda: bool(runtime.targets))
        assert runtime.metrics_server is None
    with socket.socket() as taken:
        taken.bind(("127.0.0.1", 0))
        taken.listen()
        port = taken.getsockname()[1]
        runtime = Runtime(config(tmp_path, station, f"prometheus_port = {port}"))
        with pytest.raises(ConfigError, match=r"metrics\.prometheus_port: cannot listen"):
            await runtime.run(asyncio.Event())
