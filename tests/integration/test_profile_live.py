"""`leakfleet profile check PROFILE --endpoint URL` against the simulator's annex stations:
records come through the gateway's own drivers, nothing is written unless allowed, and a
refused port, a wrong device id and silence are one line each."""

from __future__ import annotations

import asyncio
import json
import os
import sys
from pathlib import Path

import pytest

from tests.support.sim import running_plant

pytestmark = [pytest.mark.integration, pytest.mark.timeout(120)]
REPO = Path(__file__).resolve().parents[2]


async def _cli(*args: str) -> tuple[int, str, str]:
    proc = await asyncio.create_subprocess_exec(
        sys.executable, "-m", "gateway", "profile", "check", *args, cwd=REPO,
        stdout=asyncio.subprocess.PIPE, stderr=asyncio.subprocess.PIPE,
        env={**os.environ, "PYTHONPATH": str(REPO)})
    out, err = await asyncio.wait_for(proc.communicate(), 90)
    return proc.returncode or 0, out.decode(), err.decode()


async def test_live_checks_of_the_annex_types(tmp_path: Path) -> None:
    async with running_plant("annex", tmp_path, speed=120) as plant:
        def url(station: str) -> str:
            ep = plant.endpoints[station]
            return f"tcp://{ep.host}:{ep.port}"

        await plant.wait_for(lambda t: sum(e["kind"] == "result" for e in t) >= 10, timeout=30)
        rc, out, err = await _cli("lf-mbinput", "--endpoint", url("L3-S3"), "--records", "3",
                                  "--program", "1=MV-44", "--json", "--seconds", "30")
        assert rc == 0, err
        doc = json.loads(out)
        assert doc["summary"]["results"] >= 3
        # read-only: the station saw no acknowledge (its register 100 was never written)
        server = plant._servers["L3-S3"]
        assert getattr(server, "acknowledged", None) is None
        truth = {e["reported"]["cycle"] for e in plant.entries("L3-S3", "result")}
        assert {e["record"]["cycle"] for e in doc["entries"]} <= truth

        rc, out, err = await _cli("lf-ticket", "--endpoint", url("L3-S6"), "--address", "2",
                                  "--records", "1", "--json", "--seconds", "30")
        assert rc == 0, err
        [entry] = json.loads(out)["entries"]
        assert entry["record"]["station"] == "SAMPLE"
        ours = {e["reported"]["cycle"] for e in plant.entries("L3-S7", "result")}
        assert entry["kind"] == "calibration" or entry["record"]["cycle"] in ours

        rc, out, err = await _cli("lf-mbinput", "--endpoint", url("L3-S3"), "--device-id", "9",
                                  "--seconds", "3")
        assert rc == 2 and "no record within 3 s" in err and "Modbus exception" in err, err
        assert "Traceback" not in err and err.count("\n") == 1

        # the wrong profile for a station: its lines come back rejected, never taken
        rc, out, err = await _cli("lf-semi", "--endpoint", url("L3-S2"), "--seconds", "20",
                                  "--records", "2", "--json")
        assert rc == 0, err
        summary = json.loads(out)["summary"]
        assert summary["results"] == 0 and summary["rejected"] >= 2

        # a dump written by the probe checks with the type's profile
        for station, profile, tables, top in (("L3-S3", "lf-mbinput", "input", "120"),
                                              ("L3-S5", "lf-mbnoclk", "holding,discrete", "20"),
                                              ("L3-S4", "lf-mblast", "holding,coils", "20")):
            dump = tmp_path / f"{station}.json"
            proc = await asyncio.create_subprocess_exec(
                sys.executable, "-m", "gateway", "probe", "modbus", url(station), "--device",
                "1", "--range", f"0-{top}", "--table", tables, "--dump", str(dump), cwd=REPO,
                stdout=asyncio.subprocess.DEVNULL, stderr=asyncio.subprocess.PIPE,
                env={**os.environ, "PYTHONPATH": str(REPO)})
            _, perr = await asyncio.wait_for(proc.communicate(), 60)
            assert proc.returncode == 0, perr.decode()
            rc, out, err = await _cli(profile, str(dump), "--json", "--program", "1=MV-44")
            assert rc == 0, err
            got = [e for e in json.loads(out)["entries"] if e["kind"] == "result"]
            truth = {e["reported"]["cycle"] for e in plant.entries(station, "result")}
            assert got and {e["record"]["cycle"] for e in got} <= truth, (station, got)

    # silence: a port that accepts and never says anything; and garbage: noise, no records
    async def mute(reader: asyncio.StreamReader, writer: asyncio.StreamWriter) -> None:
        await reader.read()

    async def noisy(reader: asyncio.StreamReader, writer: asyncio.StreamWriter) -> None:
        writer.write(bytes(range(256)) * 8)
        await writer.drain()
        await reader.read()

    for handler, expect in ((mute, "the station sent nothing"), (noisy, None)):
        server = await asyncio.start_server(handler, "127.0.0.1", 0)
        port = server.sockets[0].getsockname()[1]
        try:
            rc, out, err = await _cli("lf-semi", "--endpoint", f"tcp://127.0.0.1:{port}",
                                      "--seconds", "3", "--json")
        finally:
            server.close()
        assert "Traceback" not in err
        if expect is not None:
            assert rc == 2 and expect in err and err.count("\n") == 1, err
        else:  # noise is quarantined as rejected lines, never taken as records
            assert rc == 0 and json.loads(out)["summary"]["results"] == 0, (out, err)

    rc, out, err = await _cli("lf-semi", "--endpoint", "tcp://127.0.0.1:9", "--seconds", "2")
    assert rc == 2 and "cannot open tcp://127.0.0.1:9" in err, err
    assert "Traceback" not in err
