"""Single last-result blocks on a real pymodbus TCP server: flag, counter and change detection.

The block is one lf-mbtcp result slot encoded with pymodbus's ``convert_to_registers``
(tests/gateway/drivers/station_image.py), independently of the reader's decoding.
"""

from __future__ import annotations

import asyncio
from typing import Any

import pytest
from pymodbus.server import ModbusTcpServer
from pymodbus.simulator import DataType, SimData, SimDevice

from gateway.drivers.modbus import PymodbusLink
from gateway.drivers.modbus_latest import LatestReader
from gateway.profiles.modbus_schema import AckAction, FlagSource, LatestRule
from gateway.profiles.model import BlockSpec
from gateway.records import GapEvent, TestResult
from tests.gateway.drivers.station_image import ctx, slot, spec

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
