"""The gateway never writes to a Modbus station unless a profile asks it to.

Real pymodbus TCP servers (bench/farm.py: one per station, results appearing as the gateway
runs) count every write request a peer sends them. The gateway, run as a user runs it, polls
them with the built-in lf-mbtcp profile: the servers must see no write at all. The control
run uses a profile that asks for an acknowledge register: the same servers then do see writes,
so a zero in the first run means something.
"""

from __future__ import annotations

import asyncio
import re
from pathlib import Path
from typing import Any

import pytest

from bench.modbus import Farm
from tests.faults.gw import Gateway

pytestmark = [pytest.mark.integration, pytest.mark.timeout(120)]
BUILTIN = Path(__file__).resolve().parents[2] / "gateway/profiles/builtin/lf-mbtcp.toml"


def _config(tmp: Path, ports: list[int], profile: str, profile_dir: Path | None) -> Path:
    cfg = tmp / "gateway.toml"
    text = f'site = "Northmere Works"\nstore = "sqlite:///{tmp / "journal.db"}"\n'
    if profile_dir is not None:
        text += f'profile_dirs = ["{profile_dir}"]\n'
    for i, port in enumerate(ports):
        text += (f'[[stations]]\nid = "T{i}"\nline = "L1"\nprofile = "{profile}"\n'
                 f'endpoint = "tcp://127.0.0.1:{port}"\npoll_interval = "0.1 s"\n'
                 'programs = { 1 = "HX-210" }\n')  # fmt: skip
    cfg.write_text(text)
    return cfg


async def _run(tmp: Path, profile: str, profile_dir: Path | None = None) -> dict[str, Any]:
    farm = await asyncio.to_thread(Farm, 3, 0.5)
    try:
        cfg = _config(tmp, farm.ports, profile, profile_dir)
        gw = Gateway(cfg, tmp / f"{profile}.log")
        try:
            await gw.start()
            await gw.wait_for_text("-> online", 3)
            await asyncio.sleep(3.0)  # a few results per station, read and (maybe) acknowledged
            assert await gw.stop() == 0, gw.text()[-2000:]
        finally:
            await gw.ensure_dead()
        return await asyncio.to_thread(farm.stop)
    finally:
        farm.kill()


async def test_builtin_profile_never_writes(tmp_path: Path) -> None:
    out = await _run(tmp_path, "lf-mbtcp")
    assert sum(out["published"]) > 6
    assert out["writes_refused"] == 0


async def test_a_profile_that_asks_for_writes_does_write(tmp_path: Path) -> None:
    """Control: the recording servers really see writes when a profile asks for them."""
    profiles = tmp_path / "profiles"
    profiles.mkdir()
    text = BUILTIN.read_text().replace('name = "lf-mbtcp"', 'name = "ack-mbtcp"')
    text = re.sub(r"\n\[modbus\.state\]", '\n[modbus.acknowledge]\nenabled = true\naddress = 90\n'
                  'type = "uint32"\n\n[modbus.state]', text, count=1)
    (profiles / "ack-mbtcp.toml").write_text(text)
    out = await _run(tmp_path, "ack-mbtcp", profiles)
    assert out["writes_refused"] > 0
