"""Run a scenario: a simulated clock, one runner task per station, its protocol server.

``Plant`` is the Python API (tests use it inside their own event loop)::

    async with Plant(load_scenario("demo").with_free_ports(tmp_path), speed=600) as plant:
        plant.endpoints["L1-S1"]          # Endpoint(host, port) or Endpoint(path)
        await plant.wait_for(lambda truth: len(truth) >= 5, timeout=10)

Every task lives in one ``asyncio.TaskGroup``; leaving the context stops them and closes every
server and pty. Simulated time runs ``speed`` times faster than the loop's clock.
"""

from __future__ import annotations

import asyncio
import contextlib
import logging
import random
from collections.abc import Callable
from datetime import UTC, datetime
from pathlib import Path
from types import TracebackType
from typing import Any
from zoneinfo import ZoneInfo

from sim.scenario import STREAM_TYPES, Scenario, Station
from sim.servers import (
    DelimServer,
    Endpoint,
    KvServer,
    ModbusRtuServer,
    ModbusTcpStationServer,
    StationServer,
)
from sim.servers.modbus_more import MbInputServer, MbLastServer, MbNoClockServer
from sim.servers.ticket import TicketLine, TicketStation
from sim.station import StationModel, start_time
from sim.truth import TruthLog

__all__ = ["Plant", "SimClock"]

log = logging.getLogger(__name__)


class SimClock:
    """Simulated seconds since the UNIX epoch, running ``speed`` times the loop's clock."""

    def __init__(self, start: datetime, speed: float) -> None:
        if speed <= 0:
            raise ValueError(f"speed must be > 0, got {speed}")
        self.start = start.timestamp()
        self.speed = speed
        self._loop = asyncio.get_running_loop()
        self._wall0 = self._loop.time()

    def now(self) -> float:
        return self.start + (self._loop.time() - self._wall0) * self.speed

    def datetime(self) -> datetime:
        return datetime.fromtimestamp(self.now(), UTC)

    async def sleep_until(self, t: float) -> None:
        delay = (t - self.now()) / self.speed
        if delay > 0:
            await asyncio.sleep(delay)


class Plant:
    """A running scenario: servers bound on enter, stations working until exit."""

    def __init__(
        self,
        scenario: Scenario,
        *,
        speed: float = 60.0,
        truth_path: Path | str | None = None,
        faults: bool | None = None,
        start: datetime | None = None,
        keep_truth: bool = True,
    ) -> None:
        self.scenario = scenario if faults is None else scenario.with_faults(faults)
        self.speed = speed
        self.start = start.astimezone(UTC) if start is not None else start_time(self.scenario)
        self.truth = TruthLog(
            Path(truth_path) if truth_path else None, dict(self.scenario.lines), keep=keep_truth
        )
        self.endpoints: dict[str, Endpoint] = {}
        self.models: dict[str, StationModel] = {}
        self._servers: dict[str, StationServer] = {}
        self._lines: dict[str, TicketLine] = {}  # shared lines of addressed stations
        self._stack = contextlib.AsyncExitStack()
        self._tasks: list[asyncio.Task[None]] = []
        self.clock: SimClock | None = None

    # -- lifecycle ---------------------------------------------------------------------------
    async def __aenter__(self) -> Plant:
        try:
            self.clock = SimClock(self.start, self.speed)
            for station in self.scenario.stations:
                server = self._make_server(station)
                self._servers[station.name] = server
                try:
                    await server.start()
                except OSError as exc:
                    where = f"port {station.port}" if station.port is not None else "a pty"
                    raise OSError(exc.errno, f"{station.name} on {where}: {exc.strerror}") from exc
                self.endpoints[station.name] = server.endpoint
                self.models[station.name] = StationModel(self.scenario, station, self.start)
            group = await self._stack.enter_async_context(asyncio.TaskGroup())
            for station in self.scenario.stations:
                server = self._servers[station.name]
                model = self.models[station.name]
                self._tasks.append(group.create_task(server.serve(), name=f"serve {station.name}"))
                self._tasks.append(
                    group.create_task(self._run_station(model, server), name=f"run {station.name}")
                )
                if model.faults.link_drop_every_s:
                    self._tasks.append(
                        group.create_task(
                            self._run_link(model, server), name=f"link {station.name}"
                        )
                    )
        except BaseException:
            await self._close_servers()
            self.truth.close()
            raise
        return self

    async def __aexit__(
        self,
        exc_type: type[BaseException] | None,
        exc: BaseException | None,
        tb: TracebackType | None,
    ) -> None:
        for task in self._tasks:
            task.cancel()
        try:
            await self._stack.aclose()
        finally:
            await self._close_servers()
            self.truth.close()

    async def _close_servers(self) -> None:
        for server in self._servers.values():
            try:
                await asyncio.wait_for(server.close(), 5.0)
            except (OSError, TimeoutError) as exc:
                log.warning("closing %s failed: %s", server.endpoint.station, exc)

    def _make_server(self, station: Station) -> StationServer:
        rng = random.Random(f"{self.scenario.seed}:{station.name}:wire")
        faults = station.faults if self.scenario.faults_enabled else type(station.faults)()
        run_dir = self.scenario.run_dir
        tz = ZoneInfo(self.scenario.timezone)
        if station.type in STREAM_TYPES:
            assert station.port is not None
            return DelimServer(station.name, station.port, tz, self.truth, rng, kind=station.type)
        if station.type == "lf-mbtcp":
            assert station.port is not None
            return ModbusTcpStationServer(
                station.name, station.port, station.device_id, faults, self.truth, rng,
                curves=station.trace_interval_s > 0,
            )
        if station.type == "lf-ticket":
            assert station.port is not None and station.bus is not None
            line = self._lines.get(station.bus)
            if line is None:
                line = self._lines[station.bus] = TicketLine(station.bus, station.port,
                                                             self.truth, rng)
            return TicketStation(station.name, line, station.address, tz)
        more = {"lf-mbinput": MbInputServer, "lf-mblast": MbLastServer,
                "lf-mbnoclk": MbNoClockServer}.get(station.type)
        if more is not None:
            assert station.port is not None
            return more(station.name, station.port, station.device_id, faults, self.truth, rng,
                        tz)
        link = run_dir / f"{station.tty or station.name}.tty"
        if station.type == "lf-kv":
            return KvServer(station.name, station.serial, link, faults, self.truth, rng)
        return ModbusRtuServer(station.name, link, station.device_id, faults, self.truth, rng)

    # -- station work --------------------------------------------------------------------------
    async def _run_station(self, model: StationModel, server: StationServer) -> None:
        assert self.clock is not None
        clock = self.clock
        while True:
            activity = model.next_activity()
            published = False
            for t, state in activity.states:
                if not published and t >= activity.publish_at:
                    await clock.sleep_until(activity.publish_at)
                    await server.publish(activity)
                    published = True
                await clock.sleep_until(t)
                await server.set_state(state)
            if not published:
                await clock.sleep_until(activity.publish_at)
                await server.publish(activity)
            await clock.sleep_until(activity.ends_at)

    async def _run_link(self, model: StationModel, server: StationServer) -> None:
        assert self.clock is not None
        every = model.faults.link_drop_every_s
        assert every
        k = 1
        while True:
            down_at = model.epoch + k * every
            await self.clock.sleep_until(down_at)
            log.info("%s: link down", model.station.name)
            await server.set_link(False)
            await self.clock.sleep_until(down_at + model.faults.link_drop_down_s)
            log.info("%s: link up", model.station.name)
            await server.set_link(True)
            k += 1

    # -- helpers for callers ---------------------------------------------------------------------
    async def wait_for(
        self, predicate: Callable[[list[dict[str, Any]]], bool], timeout: float
    ) -> None:
        """Wait until ``predicate(truth entries)`` holds; TimeoutError after ``timeout`` s."""
        changed = asyncio.Event()

        def poke() -> None:
            changed.set()

        self.truth.on_entry(poke)
        try:
            async with asyncio.timeout(timeout):
                while not predicate(self.truth.entries):
                    changed.clear()
                    await changed.wait()
        finally:
            self.truth.off_entry(poke)

    def entries(self, station: str | None = None, kind: str | None = None) -> list[dict[str, Any]]:
        return [
            e
            for e in self.truth.entries
            if (station is None or e["station"] == station) and (kind is None or e["kind"] == kind)
        ]
