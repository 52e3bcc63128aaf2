"""lf-mbtcp and lf-mbrtu: pymodbus servers whose registers the station writes as it works.

Registers are pymodbus ``SimDevice`` blocks served from wire address 0 (no shift: the map in
sim/README.md is the wire address). The station keeps its own image of every register, so a
server restarted after a dropped link serves the same values. A device ``action`` hook decides,
per read, whether to answer late or with an exception (faults) and refuses writes from peers.
The RTU server sits on one pty; a relay copies bytes to a second pty whose slave is the
published tty, so a dropped link is a relay that stops carrying bytes.
"""

from __future__ import annotations

import asyncio
import contextlib
import logging
import os
import random
from pathlib import Path
from typing import Any

from pymodbus.constants import ExcCodes
from pymodbus.framer import FramerType
from pymodbus.server import ModbusSerialServer, ModbusTcpServer
from pymodbus.simulator import DataType, SimData, SimDevice

from sim.formats import (
    MBRTU,
    MBTCP,
    RegisterMap,
    encode_u16,
    encode_u32,
    modbus_calibration,
    modbus_result,
    modbus_state,
)
from sim.formats_traces import TRACE_BASE, TRACE_MAX, mbtcp_trace, trace_size
from sim.scenario import Faults
from sim.servers.base import Endpoint, TruthSink
from sim.servers.pty import PtyPair, open_pty
from sim.station import Activity, SimResult

__all__ = ["ModbusRtuServer", "ModbusTcpStationServer", "TcpLifecycle", "listen_tcp",
           "read_faults"]

log = logging.getLogger(__name__)
logging.getLogger("pymodbus").setLevel(logging.CRITICAL)  # its own per-frame chatter is not ours


async def read_faults(faults: Faults, rng: random.Random) -> ExcCodes | None:
    """A read's faults, drawn per request: an exception reply, or an answer that comes late."""
    if faults.exception_probability and rng.random() < faults.exception_probability:
        return ExcCodes(faults.exception_code)
    if faults.slow_probability and rng.random() < faults.slow_probability:
        await asyncio.sleep(faults.slow_delay_s)
    return None


async def listen_tcp(device: SimDevice, port: int) -> tuple[ModbusTcpServer, int]:
    """A pymodbus TCP server for ``device`` on 127.0.0.1:``port`` (0: a free port), running."""
    server = ModbusTcpServer(device, address=("127.0.0.1", port))
    await server.serve_forever(background=True)
    if port == 0:
        sockets = getattr(server.transport, "sockets", None)
        if sockets:
            port = sockets[0].getsockname()[1]
    return server, port


class TcpLifecycle:
    """Start, drop and restore a Modbus TCP station's server; the station's register image
    (``_restore``) outlives a dropped link. Needs ``_device``, ``_restore``, ``port``,
    ``station``, ``kind``, ``endpoint``, ``_server`` and ``_closed`` from the class."""

    port: int
    station: str
    kind: str
    endpoint: Endpoint
    _server: Any
    _closed: asyncio.Event

    def _device(self) -> SimDevice:
        raise NotImplementedError

    async def _restore(self) -> None:
        raise NotImplementedError

    async def _listen(self) -> None:
        self._server, self.port = await listen_tcp(self._device(), self.port)
        await self._restore()

    async def start(self) -> None:
        await self._listen()
        self.endpoint = Endpoint(self.station, self.kind, "tcp", "127.0.0.1", self.port)

    async def set_link(self, up: bool) -> None:
        if up and self._server is None:
            await self._listen()
        elif not up and self._server is not None:
            server, self._server = self._server, None
            await server.shutdown()

    async def _stop(self) -> None:
        if self._server is not None:
            server, self._server = self._server, None
            await server.shutdown()
        self._closed.set()


class _ModbusStation:
    """Register image, consistent-write protocol and per-request faults, common to TCP and RTU."""

    kind: str
    regmap: RegisterMap

    def __init__(
        self, station: str, device_id: int, faults: Faults, truth: TruthSink, rng: random.Random
    ) -> None:
        self.station = station
        self.device_id = device_id
        self.faults = faults
        self.truth = truth
        self.rng = rng
        self.size = max(self.regmap.size, trace_size()) if self.curves else self.regmap.size
        self.image = [0] * self.size
        self.image[5] = self.regmap.ring_depth
        self._curves_written = 0
        self._own_write = False
        self._server: ModbusTcpServer | ModbusSerialServer | None = None
        self._closed = asyncio.Event()
        self._results = 0
        self._calibrations = 0

    curves = False  # the station keeps its newest pressure curve in registers

    def _device(self) -> SimDevice:
        size = self.size
        block = [SimData(0, count=size, values=0, datatype=DataType.REGISTERS)]
        bits = [SimData(0, count=1, values=False, datatype=DataType.BITS)]
        none = [SimData(0, count=1, datatype=DataType.INVALID)]  # the other table: exception 02
        if self.regmap.function == 3:
            simdata = (bits, bits, block, none)
        else:
            simdata = (bits, bits, none, block)
        return SimDevice(id=self.device_id, simdata=simdata, action=self._action)

    async def _action(
        self,
        function_code: int,
        start_address: int,
        address: int,
        count: int,
        registers: list[int],
        set_values: list[int] | list[bool] | None,
    ) -> ExcCodes | None:
        if set_values is not None:
            return None if self._own_write else ExcCodes.ILLEGAL_FUNCTION  # a reader never writes
        return await read_faults(self.faults, self.rng)

    async def _write(self, address: int, values: list[int]) -> None:
        self.image[address : address + len(values)] = values
        if self._server is None:
            return
        self._own_write = True
        try:
            await self._server.async_setValues(
                self.device_id, self.regmap.function, address, values
            )
        finally:
            self._own_write = False

    async def _restore(self) -> None:
        for start in range(0, len(self.image), 100):
            await self._write(start, self.image[start : start + 100])

    async def set_state(self, state: str) -> None:
        await self._write(0, encode_u16(modbus_state(self.kind, state)))

    async def publish(self, activity: Activity) -> None:
        record = activity.record
        wo = self.regmap.word_order
        if isinstance(record, SimResult):
            encoded = modbus_result(self.kind, record)
            address = self.regmap.slot_address(record.cycle)
            counter_address, counter = 1, record.cycle
        else:
            encoded = modbus_calibration(self.kind, record)
            address = self.regmap.calibration_address
            counter_address, counter = 3, record.counter
        regs: list[int] = encoded.payload
        if activity.torn:
            # a careless firmware: the counter first, then the block in two halves
            await self._write(counter_address, encode_u32(counter, wo))
            half = len(regs) // 2
            await self._write(address, regs[:half])
            await asyncio.sleep(self.faults.torn_gap_s)
            await self._write(address + half, regs[half:])
        else:
            await self._write(address, regs)
            await self._write(counter_address, encode_u32(counter, wo))
        extra: dict[str, object] = (
            {"counter": counter} if not isinstance(record, SimResult) else {})
        if self.curves and activity.traces:
            curves = await self._publish_curves(activity)
            if curves:
                extra["traces"] = curves
        self.truth.record(
            activity,
            encoded.reported,
            encoded.resolution,
            fault="torn" if activity.torn else None,
            address=address,
            registers=regs,
            **extra,
        )

    async def _publish_curves(self, activity: Activity) -> list[dict[str, object]]:
        """The result's curve: the block holds one at a time, body first and its counter
        last, so a reader sees a whole curve or the previous one. This type keeps no
        calibration curves (its two would arrive together, the master's overwritten at once)."""
        out: list[dict[str, object]] = []
        for role, cycle, trace in activity.traces:
            if role != "result":
                continue
            self._curves_written += 1
            regs = mbtcp_trace(self._curves_written, role, cycle, trace)
            await self._write(TRACE_BASE + 2, regs[2:])
            await self._write(TRACE_BASE, regs[:2])
            out.append({"role": role, "cycle": cycle, "counter": self._curves_written,
                        "samples": min(len(trace.pressures_pa), TRACE_MAX)})
        return out

    async def serve(self) -> None:
        await self._closed.wait()


class ModbusTcpStationServer(_ModbusStation, TcpLifecycle):
    """lf-mbtcp on 127.0.0.1:<port>, holding registers, device id from the scenario (1)."""

    kind = "lf-mbtcp"
    regmap = MBTCP

    def __init__(
        self,
        station: str,
        port: int,
        device_id: int,
        faults: Faults,
        truth: TruthSink,
        rng: random.Random,
        curves: bool = False,
    ) -> None:
        self.curves = curves
        super().__init__(station, device_id, faults, truth, rng)
        self.port = port
        self.endpoint = Endpoint(station, self.kind, "tcp", "127.0.0.1", port)

    async def close(self) -> None:
        await self._stop()


class ModbusRtuServer(_ModbusStation):
    """lf-mbrtu: RTU server on an inner pty, relayed to the published pty, input registers."""

    kind = "lf-mbrtu"
    regmap = MBRTU

    def __init__(
        self,
        station: str,
        link: Path,
        device_id: int,
        faults: Faults,
        truth: TruthSink,
        rng: random.Random,
    ) -> None:
        super().__init__(station, device_id, faults, truth, rng)
        self.link = link
        self.endpoint = Endpoint(station, self.kind, "tty", path=str(link))
        self._inner: PtyPair | None = None
        self._outer: PtyPair | None = None
        self._up = True

    async def start(self) -> None:
        self._inner = open_pty()
        self._outer = open_pty(self.link)
        server = ModbusSerialServer(
            self._device(), framer=FramerType.RTU, port=self._inner.name, baudrate=19200
        )
        await server.serve_forever(background=True)
        self._server = server
        await self._restore()
        loop = asyncio.get_running_loop()
        loop.add_reader(self._inner.master, self._relay, self._inner.master, self._outer.master)
        loop.add_reader(self._outer.master, self._relay, self._outer.master, self._inner.master)

    def _relay(self, src: int, dst: int) -> None:
        try:
            data = os.read(src, 4096)
        except (BlockingIOError, OSError):
            return
        if data and self._up:
            with contextlib.suppress(BlockingIOError, OSError):
                os.write(dst, data)

    async def set_link(self, up: bool) -> None:
        self._up = up

    async def close(self) -> None:
        loop = asyncio.get_running_loop()
        for pair in (self._inner, self._outer):
            if pair is not None:
                with contextlib.suppress(ValueError, OSError):
                    loop.remove_reader(pair.master)
        if self._server is not None:
            server, self._server = self._server, None
            await server.shutdown()
        for pair in (self._inner, self._outer):
            if pair is not None:
                pair.close()
        self._closed.set()
