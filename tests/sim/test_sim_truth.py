"""The truth log: same seed → same log; every entry carries what the README documents."""

from __future__ import annotations

import json
from datetime import UTC, datetime
from pathlib import Path
from typing import Any

import pytest

from tests.sim.small_plant import BASE
from tests.support.sim import running_plant, scenario_from_text

pytestmark = [pytest.mark.integration, pytest.mark.timeout(60)]

RESULT_FIELDS = {
    "cycle", "ended_at", "program", "part_id", "verdict", "test_pressure_pa", "pressure_loss_pa",
    "leak_rate_sccm", "reject_limit_sccm", "lower_limit_sccm", "fill_s", "stabilise_s", "test_s",
    "temperature_c",
}  # fmt: skip
CALIBRATION_FIELDS = {
    "ended_at", "program", "master_loss_pa", "standard_loss_pa", "standard_sccm",
    "standard_ref_pressure_pa", "ratio", "sensitivity", "passed",
}  # fmt: skip


async def _run(tmp_path: Path, name: str) -> list[dict[str, Any]]:
    scenario = scenario_from_text(BASE)
    async with running_plant(scenario, tmp_path, speed=1200, truth_name=name) as plant:
        await plant.wait_for(
            lambda t: all(
                sum(e["station"] == s and e["kind"] == "result" for e in t) >= 12
                for s in ("D1", "K1", "T1", "R1")
            ),
            timeout=30,
        )
    return [json.loads(line) for line in (tmp_path / name).read_text().splitlines()]


def _per_station(entries: list[dict[str, Any]], n: int = 12) -> dict[str, list[dict[str, Any]]]:
    out: dict[str, list[dict[str, Any]]] = {}
    for e in entries:
        if e["kind"] in ("result", "calibration"):
            clean = {
                k: v for k, v in e.items() if k != "listeners"
            }  # who listened is not the plant's doing
            out.setdefault(e["station"], []).append(clean)
    return {k: v[:n] for k, v in out.items()}


async def test_same_seed_same_truth(tmp_path: Path) -> None:
    first = await _run(tmp_path, "a.jsonl")
    second = await _run(tmp_path, "b.jsonl")
    assert _per_station(first) == _per_station(second)
    # the scenario's start (07:00 Berlin = 06:00 UTC) anchors the simulated clock
    t0 = min(datetime.fromisoformat(e["true_ended_at"]) for e in first if "true_ended_at" in e)
    assert datetime(2026, 12, 2, 6, 0, tzinfo=UTC) < t0 < datetime(2026, 12, 2, 6, 5, tzinfo=UTC)
    for e in first:
        if e["kind"] == "result":
            assert set(e["reported"]) == RESULT_FIELDS
            assert set(e["resolution"]) <= RESULT_FIELDS
            assert isinstance(e["true_leak_sccm"], float)
        elif e["kind"] == "calibration":
            assert set(e["reported"]) == CALIBRATION_FIELDS
        assert e["line"] == "L1" or e["kind"] == "garbage"
