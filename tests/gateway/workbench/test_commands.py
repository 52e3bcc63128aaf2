"""``leakfleet probe modbus`` and ``leakfleet capture`` as an integrator runs them: against the
simulator's stations over their real transports, and against a silent port, a wrong device id
and garbage, each ending in one line and never a traceback."""

from __future__ import annotations

import asyncio
import json
import socket
import struct
import sys
from pathlib import Path

import pytest

from gateway.workbench.dump import dump_from_json
from tests.support.sim import running_plant

pytestmark = [pytest.mark.integration, pytest.mark.timeout(120)]
REPO = Path(__file__).resolve().parents[3]


async def _leakfleet(*args: str, cwd: Path = REPO) -> tuple[int, str, str]:
    proc = await asyncio.create_subprocess_exec(
        sys.executable, "-m", "gateway", *args, cwd=cwd,
        stdout=asyncio.subprocess.PIPE, stderr=asyncio.subprocess.PIPE,
    )
    out, err = await asyncio.wait_for(proc.communicate(), 90)
    assert proc.returncode is not None
    return proc.returncode, out.decode(), err.decode()


def _one_line_error(rc: int, err: str) -> str:
    assert rc == 2, err
    assert "Traceback" not in err
    lines = [x for x in err.splitlines() if x.strip()]
    assert len(lines) == 1, err
    return lines[0]


async def test_probe_finds_counter_ring_and_values_of_a_tcp_station(tmp_path: Path) -> None:
    """lf-mbtcp (sim/README.md): uint32 counter at holding 1, 8 slots of 32 at 100, test
    pressure float32 ABCD in kPa at slot offset 6."""
    async with running_plant("demo", tmp_path, speed=120) as plant:
        ep = plant.endpoints["L1-S2"]
        dump = tmp_path / "l1s2.json"
        rc, out, err = await _leakfleet(
            "probe", "modbus", f"tcp://{ep.host}:{ep.port}", "--device", "1", "--table",
            "holding", "--range", "0-360", "--watch", "6", "--interval", "0.6", "--json",
            "--dump", str(dump))
        assert rc == 0, err
        report = json.loads(out)
        watch = report["watch"]
        best = watch["counters"][0]
        assert (best["table"], best["address"]) == ("holding", 2)  # the counter's low word
        assert any("low word of a uint32 at holding 1 (ABCD)" in n for n in watch["notes"])
        assert watch["ring"] is not None and watch["ring"][1] == 32
        pairs = report["tables"]["holding"]["pairs"]
        pressures = [p["float32"] for p in pairs if p["order"] == "ABCD"
                     and (p["address"] - 100) % 32 == 6 and 250 < p["float32"] < 400]
        assert pressures  # a test pressure in kPa where the register map says
        back = dump_from_json(dump.read_text())
        assert len(back.snapshots) == 6 and back.device_id == 1


async def test_probe_reads_an_rtu_station_over_a_serial_line(tmp_path: Path) -> None:
    async with running_plant("demo", tmp_path, speed=120) as plant:
        tty = plant.endpoints["L2-S3"].path
        await plant.wait_for(lambda t: sum(e["station"] == "L2-S3" and e["kind"] == "result"
                                           for e in t) >= 2, timeout=30)
        rc, out, err = await _leakfleet(
            "probe", "modbus", str(tty), "--device", "7", "--table", "input", "--range",
            "0-40", "--json")
        assert rc == 0, err
        regs = json.loads(out)["tables"]["input"]["registers"]
        # lf-mbrtu (sim/README.md): state at input 0, uint32 result counter CDAB at 1..2
        assert len(regs) == 41 and regs[1]["value"] >= 2
        rc, out, err = await _leakfleet(
            "probe", "modbus", str(tty), "--device", "9", "--range", "1000-1003",
            "--timeout", "0.3")
        line = _one_line_error(rc, err)
        # a device id nobody serves: silence on a real RS-485 line, an exception reply from
        # the simulator's pymodbus server; either way the line names the device and the id
        assert "device 9" in line and "device id" in line


async def _serve(handler) -> tuple[asyncio.AbstractServer, int]:  # type: ignore[no-untyped-def]
    server = await asyncio.start_server(handler, "127.0.0.1", 0)
    return server, server.sockets[0].getsockname()[1]


async def test_probe_errors_in_one_line() -> None:
    async def silent(reader: asyncio.StreamReader, writer: asyncio.StreamWriter) -> None:
        await reader.read(100)
        await asyncio.sleep(5)

    async def garbage(reader: asyncio.StreamReader, writer: asyncio.StreamWriter) -> None:
        await reader.read(100)
        writer.write(bytes(range(7, 90)))
        await writer.drain()
        await asyncio.sleep(5)

    with socket.socket() as s:  # a port nobody listens on
        s.bind(("127.0.0.1", 0))
        closed = s.getsockname()[1]
    rc, _, err = await _leakfleet("probe", "modbus", f"tcp://127.0.0.1:{closed}")
    assert "cannot connect" in _one_line_error(rc, err)
    for handler in (silent, garbage):
        server, port = await _serve(handler)
        async with server:
            rc, _, err = await _leakfleet("probe", "modbus", f"tcp://127.0.0.1:{port}",
                                          "--range", "0-9", "--timeout", "0.3")
        assert "no answer from device 1" in _one_line_error(rc, err), handler.__name__
    rc, _, err = await _leakfleet("probe", "modbus", "tcp://127.0.0.1:1", "--range", "9-2")
    assert "--range" in _one_line_error(rc, err)


async def test_capture_a_streaming_station_and_check_it(tmp_path: Path) -> None:
    async with running_plant("demo", tmp_path, speed=120) as plant:
        ep = plant.endpoints["L1-S1"]
        out = tmp_path / "l1s1.txt"
        rc, text, err = await _leakfleet("capture", f"tcp://{ep.host}:{ep.port}", "--lines",
                                         "4", "--out", str(out), "--json")
        assert rc == 0, err
        summary = json.loads(text)
        assert summary["line_ends"] >= 4 and summary["verdict"] == "readable"
        stamps = [json.loads(x) for x in (tmp_path / "l1s1.txt.times.jsonl").read_text()
                  .splitlines()]
        assert sum(s["bytes"] for s in stamps) == out.stat().st_size
        rc, text, err = await _leakfleet("profile", "check", "lf-delim", str(out),
                                         "--timezone", "Europe/Berlin", "--json")
        assert rc == 0, err
        rc, _, err = await _leakfleet("capture", f"tcp://{ep.host}:{ep.port}", "--lines", "1",
                                      "--out", str(out))
        assert "exists" in _one_line_error(rc, err)
        # a request/response station says nothing unasked
        tty = plant.endpoints["L1-S3"].path
        rc, _, err = await _leakfleet("capture", str(tty), "--seconds", "1", "--out",
                                      str(tmp_path / "kv.txt"))
        assert "silence" in _one_line_error(rc, err)
        assert not (tmp_path / "kv.txt").exists()


def test_float_helper_is_big_endian() -> None:
    assert struct.unpack(">HH", struct.pack(">f", 1.0)) == (0x3F80, 0)


async def test_probe_finds_the_annex_modbus_layouts(tmp_path: Path) -> None:
    """lf-mbinput (sim/README.md): uint16 counter at input 0 that wraps, 4 slots of 24 from 10,
    test pressure float32 with the low word first (CDAB) in mbar at slot offset 12;
    lf-mbnoclk: a block at holding 0..6 rewritten by every result, cycle uint32 DCBA at 0."""
    # 60x with a poll every 0.5 s: about one station cycle per poll, as a person probing a
    # real station every few seconds sees it
    async with running_plant("annex", tmp_path, speed=60) as plant:
        # probing starts once the station has results (a counter jumping from 0 to 65530 on
        # power-up is no step)
        await plant.wait_for(lambda t: sum(e["station"] == "L3-S3" for e in t) >= 2, timeout=30)
        ep = plant.endpoints["L3-S3"]
        rc, out, err = await _leakfleet(
            "probe", "modbus", f"tcp://{ep.host}:{ep.port}", "--device", "1", "--table",
            "input", "--range", "0-120", "--watch", "8", "--interval", "0.5", "--json")
        assert rc == 0, err
        report = json.loads(out)
        watch = report["watch"]
        found = [(c["table"], c["address"]) for c in watch["counters"]]
        assert found[0] == ("input", 0), found
        assert watch["ring"] is None or watch["ring"][1] == 24
        pairs = report["tables"]["input"]["pairs"]
        # 20 psi = 1378.95 mbar (pint: Quantity(20, "psi").to("mbar")): MV-44's test pressure
        pressures = [p["float32"] for p in pairs if p["order"] == "CDAB"
                     and (p["address"] - 10) % 24 == 12 and 1300 < p["float32"] < 1450]
        assert pressures

        ep = plant.endpoints["L3-S5"]
        rc, out, err = await _leakfleet(
            "probe", "modbus", f"tcp://{ep.host}:{ep.port}", "--device", "1", "--table",
            "holding", "--range", "0-20", "--watch", "6", "--interval", "0.6", "--json")
        assert rc == 0, err
        watch = json.loads(out)["watch"]
        assert watch["counters"] and watch["counters"][0]["address"] in (0, 1)
        assert watch["counters"][0]["order"] in ("BA", "DCBA")  # bytes low first (DCBA)
        assert any(block[1] <= 6 for block in watch["blocks"]), watch  # the block at 0..6
