"""Start a simulated plant inside a test's event loop and hand back its endpoints and truth.

    from tests.support.sim import running_plant

    async def test_something(tmp_path):
        async with running_plant("demo", tmp_path, speed=600, faults=True) as plant:
            ep = plant.endpoints["L1-S1"]            # .host/.port, or .path for a tty
            await plant.wait_for(lambda t: sum(e["kind"] == "result" for e in t) >= 10, timeout=20)
            plant.entries("L1-S1", "result")          # truth entries so far
        # the truth log is also at tmp_path / "truth.jsonl"

Ports are always free ones picked by the OS (the demo's fixed ports are for the demo only),
and the pty symlinks live under ``tmp_path / "run"``.
"""

from __future__ import annotations

import asyncio
import contextlib
from collections.abc import AsyncIterator
from datetime import datetime
from pathlib import Path

from sim.run import Plant
from sim.scenario import Scenario, load_scenario, loads_scenario

__all__ = ["running_plant", "scenario_from_text", "wait_online"]


def scenario_from_text(text: str, base_dir: Path | None = None) -> Scenario:
    """A scenario from TOML text (``extends = "demo"`` works)."""
    return loads_scenario(text, "<test scenario>", base_dir)


@contextlib.asynccontextmanager
async def running_plant(
    scenario: str | Path | Scenario,
    tmp_path: Path,
    *,
    speed: float = 600.0,
    faults: bool | None = None,
    start: datetime | None = None,
    truth_name: str = "truth.jsonl",
) -> AsyncIterator[Plant]:
    sc = scenario if isinstance(scenario, Scenario) else load_scenario(scenario)
    sc = sc.with_free_ports(tmp_path / "run")
    async with Plant(
        sc, speed=speed, truth_path=tmp_path / truth_name, faults=faults, start=start
    ) as plant:
        yield plant


async def wait_online(log: Path, stations: list[str], proc: asyncio.subprocess.Process) -> None:
    """Until a gateway started as its own process logs every station online (90 s at most)."""
    async with asyncio.timeout(90):
        while True:
            text = log.read_text(errors="replace") if log.exists() else ""
            if all(f"{s}: start -> online" in text for s in stations):
                return
            if proc.returncode is not None:
                raise AssertionError(f"gateway exited early:\n{text[-3000:]}")
            await asyncio.sleep(0.05)
