"""Single last-result blocks on a real pymodbus TCP server: flag, counter and change detection.

The block is one lf-mbtcp result slot encoded with pymodbus's ``convert_to_registers``
(tests/gateway/drivers/station_image.py), independently of the reader's decoding.
"""

from __future__ import annotations

import asyncio
from datetime import UTC, datetime
from typing import Any
from zoneinfo import ZoneInfo

import pytest
from pymodbus.client import AsyncModbusTcpClient
from pymodbus.server import ModbusTcpServer
from pymodbus.simulator import DataType, SimData, SimDevice

from gateway.drivers.base import StationTarget
from gateway.drivers.modbus import PymodbusLink, run_modbus_bus
from gateway.drivers.modbus_latest import LatestReader
from gateway.profiles import StationContext, load_profile
from gateway.profiles.modbus_schema import AckAction, FlagSource, LatestRule
from gateway.profiles.model import BlockSpec
from gateway.records import GapEvent, TestResult
from tests.gateway.drivers.station_image import ctx, slot, spec
from tests.integration.test_drivers_real_peers import FAST, Collect, running, until

pytestmark = [pytest.mark.integration, pytest.mark.timeout(30)]

AT = 100


def block_spec() -> BlockSpec:
    ring = spec().result
    return BlockSpec(0, "uint32", AT, 30, 0, 28, ring.fields)


class Station:
    """Registers and coils served by pymodbus; every write the gateway makes is recorded."""

    def __init__(self, cycle: int, flag: bool) -> None:
        self.regs = [0] * 200
        self.regs[AT : AT + 30] = slot(cycle)
        self.coils = [flag, False]
        self.writes: list[tuple[int, int, list[Any]]] = []

    async def action(self, function_code: int, start_address: int, address: int, count: int,
                     registers: list[int], set_values: Any) -> None:
        if set_values is not None:
            self.writes.append((function_code, address, list(set_values)))

    async def serve(self) -> tuple[ModbusTcpServer, PymodbusLink]:
        hr = [SimData(0, count=200, values=self.regs, datatype=DataType.REGISTERS)]
        coils = [SimData(0, count=2, values=self.coils, datatype=DataType.BITS)]
        device = SimDevice(id=1, simdata=(coils, coils, hr, hr), action=self.action)
        server = ModbusTcpServer(device, address=("127.0.0.1", 0))
        await server.serve_forever(background=True)
        port = server.transport.sockets[0].getsockname()[1]  # type: ignore[attr-defined]
        link = PymodbusLink(f"tcp://127.0.0.1:{port}", timeout=1.0)
        await link.connect()
        return server, link


def results(items: list[Any]) -> list[int]:
    return [i.cycle for i in items if isinstance(i, TestResult)]


async def test_flag_block_taken_once_and_flag_cleared() -> None:
    station = Station(41, flag=True)
    server, link = await station.serve()
    try:
        rule = LatestRule(detect="flag", address=AT, length=30, cycle_at=0, cycle_type="uint32",
                          flag=FlagSource(function=1, address=0),
                          ack=(AckAction(function=5, address=0, value="clear"),))
        r = LatestReader("T1", spec(), block_spec(), rule, ctx())
        got: list[Any] = []
        for _ in range(4):
            got += (await r.poll(link)).items
        assert results(got) == [41]
        assert [(fc, a) for fc, a, _ in station.writes] == [(5, 0)]
        assert not station.writes[0][2][0]  # the flag written back to 0
    finally:
        link.close()
        await server.shutdown()


async def test_counter_block_acknowledged_with_the_cycle_and_a_jump_is_a_gap() -> None:
    station = Station(7, flag=False)
    server, link = await station.serve()
    try:
        rule = LatestRule(detect="counter", address=AT, length=30, cycle_at=0,
                          cycle_type="uint32",
                          ack=(AckAction(function=6, address=150, value="cycle"),))
        r = LatestReader("T1", spec(), block_spec(), rule, ctx(), resume_cycle=4)
        out = await r.poll(link)
        assert results(out.items) == [7]
        gaps = [i for i in out.items if isinstance(i, GapEvent)]
        assert [(g.first, g.last, g.source) for g in gaps] == [(5, 6, "sequence")]
        assert station.writes == [(6, 150, [7])]
        assert results((await r.poll(link)).items) == []  # the same block: nothing new
    finally:
        link.close()
        await server.shutdown()


async def test_reader_never_writes_without_ack_entries() -> None:
    station = Station(3, flag=True)
    server, link = await station.serve()
    try:
        rule = LatestRule(detect="change", address=AT, length=30, cycle_at=0,
                          cycle_type="uint32")
        r = LatestReader("T1", spec(), block_spec(), rule, ctx())
        first = await r.poll(link)
        assert results(first.items) == []  # a changed block needs a second, equal read
        second = await r.poll(link)
        assert results(second.items) == [3]
        await asyncio.sleep(0)
        assert results((await r.poll(link)).items) == []
        assert station.writes == []
    finally:
        link.close()
        await server.shutdown()


def _badc(value: float) -> list[int]:
    """float32 with the bytes of each word swapped (BADC), from pymodbus's own encoder."""
    words = AsyncModbusTcpClient.convert_to_registers(
        value, AsyncModbusTcpClient.DATATYPE.FLOAT32, word_order="big")
    return [((w & 0xFF) << 8) | (w >> 8) for w in words]


async def test_lf_mblast_profile_through_the_bus_loop() -> None:
    dt = AsyncModbusTcpClient.DATATYPE
    regs = [0] * 200
    regs[0:16] = [
        *AsyncModbusTcpClient.convert_to_registers(4294967295, dt.UINT32, word_order="big"),
        0x2026, 0x1203, 0x1405, 0x0009,  # packed BCD, local time
        0x0100 | 0x0008 | 1,  # verdict 1 (pass) in bits 0..2, reason 1 and a reserved bit
        2, *_badc(0.85), *_badc(12.5), 200, 30, 50, 80,
    ]
    station = Station(1, flag=True)
    station.regs[:] = regs
    server, link = await station.serve()
    link.close()
    port = server.transport.sockets[0].getsockname()[1]  # type: ignore[attr-defined]
    try:
        t = StationTarget(
            station="S1", endpoint=f"tcp://127.0.0.1:{port}", profile=load_profile("lf-mblast"),
            context=StationContext(station="S1", line="L1", timezone="UTC", programs={}),
            poll_interval_s=0.02, timeout_s=0.5,
        )
        out = Collect()
        async with running(run_modbus_bus([t], out, FAST)):
            await until(lambda: bool(out.of(TestResult)) and bool(station.writes))
            await asyncio.sleep(0.1)  # more polls: the flag is 0 now, nothing is taken again
        [r] = out.of(TestResult)
        assert r.cycle == 4294967295 and r.verdict == "pass" and r.program == "2"
        # 14:05:09 in Europe/Berlin (CET, UTC+1 in December), converted by zoneinfo
        want = datetime(2026, 12, 3, 14, 5, 9, tzinfo=ZoneInfo("Europe/Berlin"))
        assert r.ended_at == want.astimezone(UTC)
        assert r.leak_rate_sccm == pytest.approx(0.85, rel=1e-6)  # float32 precision
        assert r.pressure_loss_pa == pytest.approx(12.5)
        assert r.reject_limit_sccm == pytest.approx(2.0) and r.test_s == pytest.approx(8.0)
        assert [(fc, a) for fc, a, _ in station.writes] == [(5, 0)]
    finally:
        await server.shutdown()


def _dcba(value: int) -> list[int]:
    """int32 low word first with each word's bytes swapped (DCBA), from pymodbus's encoder."""
    words = AsyncModbusTcpClient.convert_to_registers(
        value, AsyncModbusTcpClient.DATATYPE.INT32, word_order="little")
    return [((w & 0xFF) << 8) | (w >> 8) for w in words]


async def test_lf_mbnoclk_change_detected_with_verdict_from_discrete_inputs() -> None:
    regs = [*_dcba(70001), 3, *_dcba(850), *_dcba(125)] + [0] * 20
    inputs = [False, True, False]  # DI0 fail, DI1 gross, DI2 no abort -> gross
    hr = [SimData(0, count=len(regs), values=regs, datatype=DataType.REGISTERS)]
    di = [SimData(0, count=3, values=inputs, datatype=DataType.BITS)]
    writes: list[Any] = []

    async def action(function_code: int, start_address: int, address: int, count: int,
                     registers: list[int], set_values: Any) -> None:
        if set_values is not None:
            writes.append(function_code)

    device = SimDevice(id=1, simdata=(di, di, hr, hr), action=action)
    server = ModbusTcpServer(device, address=("127.0.0.1", 0))
    await server.serve_forever(background=True)
    port = server.transport.sockets[0].getsockname()[1]  # type: ignore[attr-defined]
    try:
        t = StationTarget(
            station="S1", endpoint=f"tcp://127.0.0.1:{port}", profile=load_profile("lf-mbnoclk"),
            context=StationContext(station="S1", line="L1", timezone="UTC", programs={}),
            poll_interval_s=0.02, timeout_s=0.5,
        )
        out = Collect()
        async with running(run_modbus_bus([t], out, FAST)):
            await until(lambda: bool(out.of(TestResult)))
            await asyncio.sleep(0.1)  # the block stays the same: not taken again
        [r] = out.of(TestResult)
        assert r.cycle == 70001 and r.program == "3" and r.verdict == "gross"
        assert r.leak_rate_sccm == pytest.approx(0.85)  # 850 x 0.001
        assert r.pressure_loss_pa == pytest.approx(12.5)  # 125 x 0.1
        assert r.time_source == "gateway"
        assert writes == []  # no ack listed: never a write
    finally:
        await server.shutdown()

