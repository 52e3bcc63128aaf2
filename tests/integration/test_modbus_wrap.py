"""A 16-bit result counter wrapping 65535 -> 0 on a real pymodbus TCP server, across a restart.

The station image is encoded with pymodbus's ``convert_to_registers`` (tests/gateway/drivers/
station_image.py); 16-bit unsigned wrap is how a Modbus register counts (Modbus application
protocol spec 1.1b3, 4.2: registers are 16-bit words).
"""

from __future__ import annotations

import dataclasses

import pytest
from pymodbus.server import ModbusTcpServer
from pymodbus.simulator import DataType, SimData, SimDevice

from gateway.drivers.base import StationTarget
from gateway.drivers.modbus import run_modbus_bus
from gateway.profiles import StationContext, load_profile
from gateway.records import Rejected, TestResult
from tests.gateway.drivers.test_counter_wrap import Image16, spec16
from tests.integration.test_drivers_real_peers import (
    FAST,
    Collect,
    RecordingStation,
    running,
    until,
)

pytestmark = [pytest.mark.integration, pytest.mark.timeout(30)]


def target(endpoint: str, resume: int | None) -> StationTarget:
    profile = dataclasses.replace(load_profile("lf-mbtcp"), modbus=spec16())
    return StationTarget(
        station="S1", endpoint=endpoint, profile=profile,
        context=StationContext(station="S1", line="L1", timezone="UTC", programs={1: "HX-210"}),
        poll_interval_s=0.02, timeout_s=0.5, resume_cycle=resume,
    )


async def run_against(image: Image16, resume: int | None, want: int) -> Collect:
    station = RecordingStation(image)
    block = [SimData(0, count=600, values=image.regs, datatype=DataType.REGISTERS)]
    bits = [SimData(0, count=1, values=False, datatype=DataType.BITS)]
    device = SimDevice(id=1, simdata=(bits, bits, block, block), action=station.action)
    server = ModbusTcpServer(device, address=("127.0.0.1", 0))
    await server.serve_forever(background=True)
    try:
        port = server.transport.sockets[0].getsockname()[1]  # type: ignore[attr-defined]
        out = Collect()
        async with running(run_modbus_bus([target(f"tcp://127.0.0.1:{port}", resume)], out,
                                          FAST)):
            await until(lambda: len(out.of(TestResult)) >= want)
        assert station.writes == []  # no acknowledge register: never a write
        return out
    finally:
        await server.shutdown()


async def test_wrap_and_restart_lose_nothing() -> None:
    image = Image16()
    for c in (65533, 65534):
        image.publish(c)
    first = await run_against(image, None, 2)  # first contact: the rest of the ring is empty
    assert [r.cycle for r in first.of(TestResult)] == [65533, 65534]
    assert first.of(Rejected) == []
    for c in (65535, 0, 1):
        image.publish(c)
    # the gateway restarts, resuming from the newest journalled cycle; it re-reads the ring
    # (repeats are the journal's to ignore) and takes the cycles after the wrap
    second = await run_against(image, 65534, 5)
    got = [r.cycle for r in second.of(TestResult)]
    assert got[-3:] == [65535, 0, 1] and got.count(0) == 1
    assert second.of(Rejected) == []
