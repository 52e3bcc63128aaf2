"""Pressure-decay physics of one test, computed rather than faked.

The gas in the test volume is tracked as ``m = P_abs·V/T`` (proportional to its moles). Leaks
remove standard volume at ``Q(P)``; the pressure follows ``P_abs = m·T_gas/V``. The gas
temperature is the part wall's (which relaxes from the temperature the part arrived with towards
the fixture's, itself drifting with the ambient) plus the adiabatic heating of fill, which decays
with its own time constant. Leaks are laminar: ``Q ∝ P_abs² − P_atm²``, given at a reference
gauge pressure. With no thermal effect the loss reduces to the isothermal closed form of
``gateway.calibration.expected_loss_pa``.

Pure: no I/O, no clocks; noise comes from the ``random.Random`` a caller passes in.
"""

from __future__ import annotations

import math
import random
from collections.abc import Sequence
from dataclasses import dataclass
from typing import ClassVar

from gateway.calibration import sccm_to_m3s
from gateway.units import KELVIN_OFFSET, P_STD_PA, T_STD_K

__all__ = [
    "P_ATM_PA",
    "TestConditions",
    "TestOutcome",
    "fill_pressure_pa",
    "isolated_curve",
    "laminar_flow",
    "simulate_test",
]

P_ATM_PA = P_STD_PA  # ambient pressure the station vents to and measures gauge from

_STEP_S = 0.1  # integration step; RK4 over a smooth right-hand side, error far below noise


def laminar_flow(
    flow_sccm: float, at_gauge_pa: float, p_abs_pa: float, atm_pa: float = P_ATM_PA
) -> float:
    """Flow of a laminar leak rated ``flow_sccm`` at ``at_gauge_pa``, gas at ``p_abs_pa``."""
    ref_abs = at_gauge_pa + atm_pa
    denominator = ref_abs * ref_abs - atm_pa * atm_pa
    if denominator <= 0:
        return flow_sccm
    return flow_sccm * max(p_abs_pa * p_abs_pa - atm_pa * atm_pa, 0.0) / denominator


def fill_pressure_pa(test_pressure_pa: float, leak_sccm: float, fill_capacity_sccm: float) -> float:
    """Gauge pressure reached at the end of fill: the supply loses against a big leak."""
    return test_pressure_pa / (1.0 + max(leak_sccm, 0.0) / fill_capacity_sccm)


@dataclass(frozen=True, slots=True)
class TestConditions:
    """Everything that decides one test's pressure trace (SI units, gauge pressures)."""

    __test__: ClassVar[bool] = False  # not a pytest class

    volume_m3: float
    test_pressure_pa: float
    stabilise_s: float
    test_s: float
    leak_sccm: float = 0.0  # total laminar leak (part + fixture seal + open standard)
    leak_rated_at_pa: float | None = (
        None  # gauge pressure the leak is rated at (default: test pressure)
    )
    fixture_c: float = 20.0
    ambient_rate_k_per_s: float = 0.0  # fixture temperature drift during the test
    fill_heating_k: float = 0.0  # gas above the wall at the end of fill
    thermal_tau_s: float = 2.5
    part_offset_k: float = 0.0  # part wall above the fixture at the end of fill
    part_tau_s: float = 600.0
    noise_pa: float = 0.0  # transducer noise (1 sigma) per reading
    resolution_pa: float = 0.0  # transducer quantisation step (0 = none)
    start_pressure_pa: float | None = (
        None  # gauge pressure at the end of fill (default: test pressure)
    )


@dataclass(frozen=True, slots=True)
class TestOutcome:
    """Pressures the station sees (gauge, Pa) and the loss it measures over the test time."""

    __test__: ClassVar[bool] = False

    pressure_at_test_start_pa: float
    pressure_at_test_end_pa: float
    loss_pa: float  # measured: noisy, quantised readings
    loss_exact_pa: float  # noise-free


def _gas_temperature_k(c: TestConditions, t: float) -> float:
    wall = c.fixture_c + c.ambient_rate_k_per_s * t + c.part_offset_k * math.exp(-t / c.part_tau_s)
    return wall + c.fill_heating_k * math.exp(-t / c.thermal_tau_s) + KELVIN_OFFSET


def _pressure_abs(c: TestConditions, m: float, t: float) -> float:
    return m * _gas_temperature_k(c, t) / c.volume_m3


def _dm_dt(c: TestConditions, m: float, t: float) -> float:
    rated = c.test_pressure_pa if c.leak_rated_at_pa is None else c.leak_rated_at_pa
    q_sccm = laminar_flow(c.leak_sccm, rated, _pressure_abs(c, m, t))
    # standard volume leaving per second, as P·V/T at standard conditions
    return -sccm_to_m3s(q_sccm) * P_STD_PA / T_STD_K


def _integrate(c: TestConditions, m: float, t0: float, t1: float) -> float:
    if t1 <= t0:
        return m
    steps = max(1, math.ceil((t1 - t0) / _STEP_S))
    h = (t1 - t0) / steps
    t = t0
    for _ in range(steps):
        k1 = _dm_dt(c, m, t)
        k2 = _dm_dt(c, m + h * k1 / 2, t + h / 2)
        k3 = _dm_dt(c, m + h * k2 / 2, t + h / 2)
        k4 = _dm_dt(c, m + h * k3, t + h)
        m += h * (k1 + 2 * k2 + 2 * k3 + k4) / 6
        t += h
    return m


def _read(c: TestConditions, p_gauge: float, rng: random.Random | None) -> float:
    value = p_gauge
    if c.noise_pa > 0 and rng is not None:
        value += rng.gauss(0.0, c.noise_pa)
    if c.resolution_pa > 0:
        value = round(value / c.resolution_pa) * c.resolution_pa
    return value


def simulate_test(c: TestConditions, rng: random.Random | None = None) -> TestOutcome:
    """Run stabilise and test from the end of fill (t = 0) and read the transducer twice."""
    p0 = c.test_pressure_pa if c.start_pressure_pa is None else c.start_pressure_pa
    m0 = (p0 + P_ATM_PA) * c.volume_m3 / _gas_temperature_k(c, 0.0)
    m_start = _integrate(c, m0, 0.0, c.stabilise_s)
    t_end = c.stabilise_s + c.test_s
    m_end = _integrate(c, m_start, c.stabilise_s, t_end)
    p_start = _pressure_abs(c, m_start, c.stabilise_s) - P_ATM_PA
    p_end = _pressure_abs(c, m_end, t_end) - P_ATM_PA
    read_start = _read(c, p_start, rng)
    read_end = _read(c, p_end, rng)
    return TestOutcome(
        pressure_at_test_start_pa=read_start,
        pressure_at_test_end_pa=read_end,
        loss_pa=read_start - read_end,
        loss_exact_pa=p_start - p_end,
    )


def isolated_curve(
    c: TestConditions, times_s: Sequence[float], rng: random.Random | None = None
) -> list[float]:
    """Transducer readings (gauge Pa) at ``times_s`` after isolation (t = 0, end of fill).

    The same gas model as ``simulate_test``, read at every sample time instead of twice: a
    station's pressure trace through stabilise and test. Times must not decrease.
    """
    p0 = c.test_pressure_pa if c.start_pressure_pa is None else c.start_pressure_pa
    m = (p0 + P_ATM_PA) * c.volume_m3 / _gas_temperature_k(c, 0.0)
    t = 0.0
    out = []
    for at in times_s:
        if at < t:
            raise ValueError("sample times must not decrease")
        m = _integrate(c, m, t, at)
        t = at
        out.append(_read(c, _pressure_abs(c, m, t) - P_ATM_PA, rng))
    return out
