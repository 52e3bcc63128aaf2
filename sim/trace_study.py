"""A long-cycle study as a plant would record it: master-part tests and master-plus-standard
tests at one long stabilise and test time, each with its pressure trace, written to a journal.

This is the input ``leakfleet report backdown`` needs (the trade's advice: start long,
calibrate, then back the times down), produced from the station's own physics: the program's
volume, pressure and fill heating, the station's seal leak, noise and resolution, the master
part's small temperature scatter.
"""

from __future__ import annotations

import random
from datetime import UTC, datetime, timedelta

from gateway.records import PressureTrace
from sim.physics import TestConditions
from sim.scenario import Scenario, Station
from sim.station import MASTER_OFFSET_SD_K
from sim.traces import simulate_trace

__all__ = ["study"]


def study(
    sc: Scenario,
    station: Station,
    program: str,
    *,
    masters: int = 20,
    standards: int = 6,
    stabilise_s: float = 30.0,
    test_s: float = 30.0,
    interval_s: float = 0.1,
    end: datetime | None = None,
    seed: int = 0,
) -> list[PressureTrace]:
    """``masters`` master-part traces, then ``standards`` with the leak standard open."""
    if program not in sc.programs:
        raise ValueError(f"no program {program!r} in scenario {sc.source} "
                         f"(programs: {', '.join(sorted(sc.programs))})")
    if masters < 2 or standards < 2:
        raise ValueError("a study needs at least 2 master and 2 standard tests")
    p = sc.programs[program]
    rng = random.Random(seed)
    end = end or datetime.now(UTC)
    out: list[PressureTrace] = []
    n = masters + standards
    for i in range(n):
        role = "master" if i < masters else "standard"
        leak = station.seal_leak_sccm + (p.standard.flow_sccm if role == "standard" else 0.0)
        c = TestConditions(
            volume_m3=p.volume_m3, test_pressure_pa=p.test_pressure_pa, stabilise_s=stabilise_s,
            test_s=test_s, leak_sccm=leak, fixture_c=sc.ambient_mean_c,
            fill_heating_k=p.fill_heating_k * rng.uniform(0.95, 1.05),
            thermal_tau_s=p.thermal_tau_s, part_offset_k=rng.gauss(0.0, MASTER_OFFSET_SD_K),
            part_tau_s=p.part_tau_s, noise_pa=station.noise_pa,
            resolution_pa=station.resolution_pa,
        )  # fmt: skip
        tr = simulate_trace(c, fill_s=p.fill_s, interval_s=interval_s, rng=rng)
        duration = (len(tr.pressures_pa) - 1) * tr.interval_s
        ended = end - timedelta(minutes=3 * (n - 1 - i))
        out.append(PressureTrace(
            station=station.name, line=station.line, cycle=900_000 + i, ended_at=ended,
            received_at=ended, started_at=ended - timedelta(seconds=duration),
            sample_interval_s=tr.interval_s, pressures_pa=tr.pressures_pa, phases=tr.phases,
            role=role, program=program, profile="sim-study",
        ))  # fmt: skip
    return out
