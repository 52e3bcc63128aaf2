"""Each station type read by a real peer: pyserial on TCP and the pty, pymodbus clients on
Modbus TCP and RTU; values decoded with pymodbus's own convert_from_registers equal the truth."""

from __future__ import annotations

import asyncio
import dataclasses
from collections.abc import Sequence
from datetime import UTC, datetime
from pathlib import Path
from typing import Any

import pytest
import serial
from pymodbus.client import AsyncModbusSerialClient, AsyncModbusTcpClient
from pymodbus.framer import FramerType

from sim.run import Plant
from sim.scenario import Scenario
from tests.sim.small_plant import BASE
from tests.support.sim import running_plant, scenario_from_text

pytestmark = [pytest.mark.integration, pytest.mark.timeout(60)]


def num(regs: Sequence[int], data_type: Any, word_order: str = "big") -> float:
    """pymodbus's own decoder, narrowed to a number."""
    value = AsyncModbusTcpClient.convert_from_registers(regs, data_type, word_order=word_order)  # type: ignore[arg-type]
    assert isinstance(value, (int, float))
    return value


def _only(scenario: Scenario, *names: str) -> Scenario:
    return dataclasses.replace(
        scenario, stations=tuple(s for s in scenario.stations if s.name in names)
    )


def _truth(plant: Plant, station: str, kind: str = "result") -> dict[int, dict[str, Any]]:
    return (
        {e["reported"]["cycle"]: e for e in plant.entries(station, kind)}
        if kind == "result"
        else {}
    )


def _read_lines(port: int, count: int) -> list[bytes]:
    # a serial device server is a raw TCP port: pyserial's socket:// URL handler speaks it
    link = serial.serial_for_url(f"socket://127.0.0.1:{port}", timeout=5)
    try:
        lines: list[bytes] = []
        while len(lines) < count:
            line = link.readline()
            if not line:
                break
            lines.append(line)
        return lines
    finally:
        link.close()


async def test_delim_lines_over_tcp(tmp_path: Path) -> None:
    scenario = _only(scenario_from_text(BASE), "D1")
    async with running_plant(scenario, tmp_path, speed=600) as plant:
        port = plant.endpoints["D1"].port
        assert port
        lines = await asyncio.to_thread(_read_lines, port, 12)
        truth = _truth(plant, "D1")
        cals = plant.entries("D1", "calibration")
    assert len(lines) == 12
    seen = 0
    for line in lines:
        assert line.endswith(b"\r\n")
        text = line[:-2].decode("ascii")
        if text.startswith("R;"):
            entry = truth[int(text.split(";")[1])]
            assert entry["raw"] == text
            assert entry["listeners"] == 1
            seen += 1
        else:
            assert text.startswith("C;") and text in {c["raw"] for c in cals}
    assert seen >= 8


def _ask(path: str, query: bytes) -> list[str]:
    with serial.Serial(path, 19200, timeout=2) as link:
        link.reset_input_buffer()
        link.write(query + b"\r")
        lines: list[str] = []
        while True:
            raw = link.readline()
            assert raw.endswith(b"\r\n"), f"no complete answer to {query!r}: {lines}"
            lines.append(raw[:-2].decode("ascii"))
            if lines[-1] == "END":
                return lines


async def test_kv_request_response_on_a_pty(tmp_path: Path) -> None:
    scenario = _only(scenario_from_text(BASE), "K1")
    async with running_plant(scenario, tmp_path, speed=300) as plant:
        path = plant.endpoints["K1"].path
        assert path == str(tmp_path / "run" / "K1.tty")
        assert Path(path).is_symlink()
        ident = await asyncio.to_thread(_ask, path, b"?ID")
        assert ident == ["MODEL=LF-KV", "FW=2.3", "SER=SIM-K1", "END"]
        assert await asyncio.to_thread(_ask, path, b"?WHAT") == ["ERR=UNKNOWN", "END"]
        await plant.wait_for(lambda t: any(e["kind"] == "result" for e in t), timeout=10)
        answers = [await asyncio.to_thread(_ask, path, b"?LAST") for _ in range(5)]
        cal = await asyncio.to_thread(_ask, path, b"?CAL")
        truth = _truth(plant, "K1")
        cals = plant.entries("K1", "calibration")
    for answer in answers:
        cycle = int(answer[1].removeprefix("CYC="))
        assert "\r\n".join(answer) == truth[cycle]["raw"]
    assert "\r\n".join(cal) in {c["raw"] for c in cals}
    assert not Path(path).exists()  # the symlink goes when the station stops


async def _consistent_slot(
    client: Any, function: str, depth: int, base: int, length: int, word_order: str, device_id: int
) -> tuple[int, list[int]]:
    """The documented consistent read: counter, slot, counter again, guards == cycle."""
    read = getattr(client, function)
    for _ in range(50):
        before = await read(1, count=2, device_id=device_id)
        assert not before.isError()
        cycle = int(
            client.convert_from_registers(
                before.registers, client.DATATYPE.UINT32, word_order=word_order
            )
        )
        if cycle == 0:
            await asyncio.sleep(0.05)
            continue
        slot = await read(base + 32 * (cycle % depth), count=length, device_id=device_id)
        after = await read(1, count=2, device_id=device_id)
        regs = slot.registers
        head = client.convert_from_registers(
            regs[0:2], client.DATATYPE.UINT32, word_order=word_order
        )
        tail = client.convert_from_registers(
            regs[-2:], client.DATATYPE.UINT32, word_order=word_order
        )
        if after.registers == before.registers and head == tail == cycle:
            return cycle, regs
    raise AssertionError("no consistent slot read")


async def test_modbus_tcp_registers_decode_to_the_truth(tmp_path: Path) -> None:
    scenario = _only(scenario_from_text(BASE), "T1")
    async with running_plant(scenario, tmp_path, speed=120) as plant:
        port = plant.endpoints["T1"].port
        assert port
        client = AsyncModbusTcpClient("127.0.0.1", port=port, timeout=2, retries=1)
        assert await client.connect()
        try:
            # address pin: the station wrote its ring depth at protocol address 5; no off-by-one
            head = await client.read_holding_registers(0, count=6, device_id=1)
            assert head.registers[5] == 8
            await plant.wait_for(lambda t: sum(e["kind"] == "result" for e in t) >= 2, timeout=20)
            cycle, regs = await _consistent_slot(
                client, "read_holding_registers", 8, 100, 30, "big", 1
            )
            cal_counter = await client.read_holding_registers(3, count=2, device_id=1)
            cal_regs = (await client.read_holding_registers(400, count=16, device_id=1)).registers
            state = (await client.read_holding_registers(0, count=1, device_id=1)).registers[0]
            write = await client.write_register(0, 1, device_id=1)
        finally:
            client.close()
        truth = _truth(plant, "T1")[cycle]
        cals = {c["counter"]: c for c in plant.entries("T1", "calibration")}
    c, dt = AsyncModbusTcpClient, AsyncModbusTcpClient.DATATYPE
    rep = truth["reported"]
    assert truth["registers"] == regs
    assert num(regs[2:4], dt.UINT32) == int(datetime.fromisoformat(rep["ended_at"]).timestamp())
    assert {3: "HX-210"}[regs[4]] == rep["program"]
    assert {1: "pass", 2: "reject", 3: "gross", 4: "aborted"}[regs[5]] == rep["verdict"]
    assert num(regs[6:8], dt.FLOAT32) * 1000 == pytest.approx(rep["test_pressure_pa"], rel=1e-12)
    assert num(regs[8:10], dt.FLOAT32) == rep["pressure_loss_pa"]
    assert num(regs[10:12], dt.FLOAT32) == rep["leak_rate_sccm"]
    assert num(regs[12:14], dt.FLOAT32) == rep["reject_limit_sccm"]
    assert num(regs[14:16], dt.FLOAT32) == rep["lower_limit_sccm"]
    assert regs[16] / 10 == rep["fill_s"] and regs[18] / 10 == rep["test_s"]
    assert num(regs[19:20], dt.INT16) / 100 == rep["temperature_c"]
    assert c.convert_from_registers(regs[20:28], dt.STRING) == rep["part_id"]
    counter = int(num(cal_counter.registers, dt.UINT32))
    assert counter >= 1
    cal = cals[counter]["reported"]
    assert num(cal_regs[6:8], dt.FLOAT32) == cal["master_loss_pa"]
    assert num(cal_regs[8:10], dt.FLOAT32) == cal["standard_loss_pa"]
    assert num(cal_regs[14:16], dt.UINT32) == counter
    assert state in (0, 1, 2, 3, 4, 5)
    assert write.isError()  # a reader never writes: the station refuses


async def test_modbus_rtu_registers_decode_to_the_truth(tmp_path: Path) -> None:
    scenario = _only(scenario_from_text(BASE), "R1")
    async with running_plant(scenario, tmp_path, speed=120) as plant:
        path = plant.endpoints["R1"].path
        assert path and Path(path).is_symlink()
        client = AsyncModbusSerialClient(
            path, framer=FramerType.RTU, baudrate=19200, timeout=2, retries=1
        )
        assert await client.connect()
        try:
            head = await client.read_input_registers(0, count=6, device_id=7)
            assert not head.isError() and head.registers[5] == 4
            await plant.wait_for(lambda t: sum(e["kind"] == "result" for e in t) >= 2, timeout=20)
            cycle, regs = await _consistent_slot(
                client, "read_input_registers", 4, 1000, 25, "little", 7
            )
            wrong_table = await client.read_holding_registers(0, count=1, device_id=7)
        finally:
            client.close()
        truth = _truth(plant, "R1")[cycle]
    c, dt = AsyncModbusSerialClient, AsyncModbusSerialClient.DATATYPE
    rep = truth["reported"]
    assert truth["registers"] == regs
    assert num(regs[2:4], dt.UINT32, word_order="little") == int(
        datetime.fromisoformat(rep["ended_at"]).astimezone(UTC).timestamp()
    )
    assert {2: "HX-210"}[regs[4]] == rep["program"]
    assert {1: "pass", 2: "reject", 4: "gross", 8: "aborted"}[regs[5]] == rep["verdict"]
    assert regs[6] * 100 == rep["test_pressure_pa"]  # mbar
    assert num(regs[7:9], dt.INT32, word_order="little") / 100 == rep["pressure_loss_pa"]
    leak = num(regs[9:11], dt.INT32, word_order="little")
    # 1 mbar·L/s = 59.2154 sccm (docs/sources.md, unit facts)
    assert int(leak) * 1e-5 * 59.2154 == pytest.approx(rep["leak_rate_sccm"], abs=1e-5)
    assert num(regs[18:19], dt.INT16) / 10 == rep["temperature_c"]
    swapped = [((r & 0xFF) << 8) | (r >> 8) for r in regs[19:23]]  # low byte first on this type
    assert c.convert_from_registers(swapped, dt.STRING) == rep["part_id"]
    assert wrong_table.isError()  # lf-mbrtu serves input registers only
