"""Faults appear on the wire as the scenario configures them."""

from __future__ import annotations

import asyncio
import dataclasses
import socket
from pathlib import Path

import pytest
import serial
from pymodbus.client import AsyncModbusTcpClient

from sim.scenario import Scenario
from tests.sim.small_plant import BASE
from tests.support.sim import running_plant, scenario_from_text

pytestmark = [pytest.mark.integration, pytest.mark.timeout(60)]


def _with_faults(station: str, faults: str) -> Scenario:
    scenario = scenario_from_text(
        "faults_enabled = true\n" + BASE + f"\n[faults.{station}]\n{faults}\n"
    )
    return dataclasses.replace(
        scenario, stations=tuple(s for s in scenario.stations if s.name == station)
    )


def _connects(port: int) -> bool:
    try:
        with socket.create_connection(("127.0.0.1", port), timeout=1):
            return True
    except ConnectionRefusedError:
        return False


async def test_dropped_link_refuses_then_accepts(tmp_path: Path) -> None:
    scenario = _with_faults("D1", 'link_drop = { every = "10 min", down = "5 min" }')
    async with running_plant(scenario, tmp_path, speed=600) as plant:
        clock, model = plant.clock, plant.models["D1"]
        assert clock is not None
        port = plant.endpoints["D1"].port
        assert port
        assert _connects(port)
        await clock.sleep_until(model.epoch + 600 + 60)
        assert not _connects(port)  # down: connection refused, like a device server that rebooted
        await clock.sleep_until(model.epoch + 600 + 300 + 60)
        assert _connects(port)


async def test_modbus_link_drop_and_exception_responses(tmp_path: Path) -> None:
    faults = (
        'link_drop = { every = "10 min", down = "5 min" }\n'
        "modbus_exception = { probability = 1.0, code = 6 }"
    )
    async with running_plant(_with_faults("T1", faults), tmp_path, speed=600) as plant:
        clock, model = plant.clock, plant.models["T1"]
        assert clock is not None
        port = plant.endpoints["T1"].port
        assert port
        client = AsyncModbusTcpClient("127.0.0.1", port=port, timeout=1, retries=0)
        try:
            assert await client.connect()
            reply = await client.read_holding_registers(0, count=6, device_id=1)
            assert reply.isError() and reply.exception_code == 6  # device busy, every time
        finally:
            client.close()
        await clock.sleep_until(model.epoch + 600 + 60)
        down = AsyncModbusTcpClient("127.0.0.1", port=port, timeout=1, retries=0, reconnect_delay=0)
        assert not await down.connect()
        down.close()
        await clock.sleep_until(model.epoch + 900 + 60)
        up = AsyncModbusTcpClient("127.0.0.1", port=port, timeout=1, retries=0)
        assert await up.connect()
        up.close()


def _read_lines(port: int, count: int) -> list[bytes]:
    link = serial.serial_for_url(f"socket://127.0.0.1:{port}", timeout=5)
    try:
        return [link.readline() for _ in range(count)]
    finally:
        link.close()


async def test_garbage_truncated_and_duplicate_lines_are_logged(tmp_path: Path) -> None:
    scenario = _with_faults("D1", "garbage = 0.4\ntruncated = 0.3\nduplicate = 0.3")
    async with running_plant(scenario, tmp_path, speed=600) as plant:
        port = plant.endpoints["D1"].port
        assert port
        lines = await asyncio.to_thread(_read_lines, port, 40)
        garbage = plant.entries("D1", "garbage")
        results = plant.entries("D1", "result")
        records = results + plant.entries("D1", "calibration")
    wire = [line[:-2] for line in lines]
    junk = {bytes.fromhex(g["raw_hex"]) for g in garbage}
    noise = [w for w in wire if not (w.startswith(b"R;") or w.startswith(b"C;")) or w in junk]
    assert noise and all(w in junk for w in noise)  # every odd line was announced in the truth
    truncated = [g for g in garbage if g.get("truncated")]
    assert truncated
    cut_records = [r["raw"].encode() for r in records if r["fault"] == "truncated"]
    for g in truncated:  # each cut line is the head of a record the truth marks as truncated
        cut = bytes.fromhex(g["raw_hex"])
        assert any(raw.startswith(cut) and raw != cut for raw in cut_records)
    dups = [r for r in results if r["fault"] == "duplicated" and r["listeners"]]
    assert dups
    for r in dups:
        if r["raw"].encode() in wire:
            assert wire.count(r["raw"].encode()) == 2


async def test_torn_block_shows_inconsistent_guards(tmp_path: Path) -> None:
    scenario = _with_faults("T1", 'torn = { probability = 1.0, gap = "0.4 s" }')
    async with running_plant(scenario, tmp_path, speed=120) as plant:
        port = plant.endpoints["T1"].port
        assert port
        client = AsyncModbusTcpClient("127.0.0.1", port=port, timeout=1, retries=0)
        assert await client.connect()
        dt = client.DATATYPE
        torn_seen = False
        try:
            last = 0
            async with asyncio.timeout(20):
                while not torn_seen:
                    counter = await client.read_holding_registers(1, count=2, device_id=1)
                    cycle = int(client.convert_from_registers(counter.registers, dt.UINT32))  # type: ignore[arg-type]
                    if cycle != last and cycle > 0:
                        slot = await client.read_holding_registers(
                            100 + 32 * (cycle % 8), count=30, device_id=1
                        )
                        regs = slot.registers
                        head = client.convert_from_registers(regs[0:2], dt.UINT32)
                        tail = client.convert_from_registers(regs[28:30], dt.UINT32)
                        torn_seen = head == cycle and tail != cycle
                        last = cycle
                    await asyncio.sleep(0.02)
        finally:
            client.close()
    assert torn_seen
    assert all(e["fault"] == "torn" for e in plant.entries("T1", "result"))


def _ask_late(path: str) -> tuple[bytes, bytes]:
    with serial.Serial(path, 19200, timeout=0.3) as link:
        link.write(b"?ID\r")
        early = link.read(100)  # nothing within the gateway's timeout
        link.timeout = 3
        late = link.read_until(b"END\r\n")
        return early, late


async def test_slow_answers_come_after_the_timeout(tmp_path: Path) -> None:
    scenario = _with_faults("K1", 'slow = { probability = 1.0, delay = "1 s" }')
    async with running_plant(scenario, tmp_path, speed=60) as plant:
        path = plant.endpoints["K1"].path
        assert path
        early, late = await asyncio.to_thread(_ask_late, path)
    assert early == b""
    assert late.endswith(b"END\r\n") and b"MODEL=LF-KV" in late
