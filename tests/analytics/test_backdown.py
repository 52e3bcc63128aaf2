"""Backing a test time down from long recorded tests (analytics.backdown).

Checks: the window emulation on curves with a known answer; the stabilisation estimate on
curves with a known transient; the span against the isothermal ideal-gas closed form (mole
balance with scipy's gas constant, not the project's own formula); and the map's %GRR against
brute-force repeated simulated tests at the same short cycle (the simulator's physics with
thermal scatter, see sim/physics.py).
"""

from __future__ import annotations

import math
import random
from datetime import UTC, datetime

import numpy as np
import pytest
from scipy import constants

from analytics.backdown import (
    K_SIGMA,
    Curve,
    backdown_map,
    curve_of,
    stabilisation,
    window_losses,
)
from gateway.records import PressureTrace
from sim.physics import TestConditions, simulate_test
from sim.traces import simulate_trace

T0 = datetime(2026, 12, 3, 8, 0, tzinfo=UTC)


def _linear(rate: float, seconds: float = 20.0, dt: float = 0.1) -> Curve:
    t = np.arange(round(seconds / dt) + 1) * dt
    return Curve(dt, 1000.0 - rate * t)


def test_a_window_of_a_linear_decay_is_rate_times_test_time() -> None:
    curves = [_linear(2.0), _linear(3.0)]
    assert window_losses(curves, 4.0, 6.0).tolist() == pytest.approx([12.0, 18.0])
    assert window_losses(curves, 1.05, 2.5).tolist() == pytest.approx([5.0, 7.5])  # between samples
    with pytest.raises(ValueError, match="longer than the recorded"):
        window_losses(curves, 15.0, 6.0)


def test_curve_of_a_trace_starts_at_isolation() -> None:
    values = [0.0, 500.0, 1000.0, 999.0, 998.0, 997.0, 10.0]
    trace = PressureTrace("L1-S1", "L1", 7, T0, T0, T0, 0.5, tuple(values),
                          (("fill", 0.0), ("stabilise", 1.0), ("test", 1.5), ("dump", 2.5)))
    curve = curve_of(trace)
    assert curve.values.tolist() == [1000.0, 999.0, 998.0, 997.0]
    assert window_losses([curve], 0.5, 1.0).tolist() == [2.0]
    bare = PressureTrace("L1-S1", "L1", 7, T0, T0, T0, 0.5, tuple(values))
    with pytest.raises(ValueError, match="where stabilise starts"):
        curve_of(bare)


def test_stabilisation_of_a_known_transient() -> None:
    # p(t) = a − L·t + A·e^(−t/τ); the transient's rate A/τ·e^(−t/τ) equals c at
    # t = τ·ln(A/(τ·c)) (differentiate the exponential: a textbook result)
    tau, amp, rate, crit = 3.0, 400.0, 1.5, 0.15
    rng = np.random.default_rng(4)
    t = np.arange(0, 40.0 + 1e-9, 0.1)
    curves = [Curve(0.1, 2e5 - rate * t + amp * np.exp(-t / tau) + rng.normal(0, 0.5, t.size))
              for _ in range(12)]
    est = stabilisation(curves, crit)
    expected = tau * math.log(amp / (tau * crit))
    assert est.settle_s == pytest.approx(expected, rel=0.05)
    assert est.tau_s == pytest.approx(tau, rel=0.05)
    assert est.low_s is not None and est.high_s is not None
    assert est.low_s <= expected <= est.high_s


def _conditions(leak: float, rng: random.Random, s: float, t: float,
                part_sd_k: float = 0.3) -> TestConditions:
    """A 250 cm³ housing at 350 kPa: fill heat relaxing with τ 2.5 s, part wall ``part_sd_k``
    (1 σ) off the fixture, 1 Pa transducer noise, 0.1 Pa resolution."""
    return TestConditions(
        volume_m3=250e-6, test_pressure_pa=350e3, stabilise_s=s, test_s=t, leak_sccm=leak,
        fill_heating_k=0.8 * rng.uniform(0.95, 1.05), thermal_tau_s=2.5,
        part_offset_k=rng.gauss(0.0, part_sd_k), part_tau_s=600.0, noise_pa=1.0, resolution_pa=0.1,
    )  # fmt: skip


SEAL, STANDARD = 0.02, 3.0  # sccm: the master part's fixture seal; the leak standard


def _traces(leak: float, n: int, seed: int, s: float = 20.0, t: float = 20.0,
            part_sd_k: float = 0.3) -> list[Curve]:
    rng = random.Random(seed)
    out = []
    for i in range(n):
        c = _conditions(leak, rng, s, t, part_sd_k)
        trace = simulate_trace(c, fill_s=2.0, interval_s=0.1, rng=rng)
        record = PressureTrace("L1-S1", "L1", i, T0, T0, T0, trace.interval_s,
                               trace.pressures_pa, trace.phases, role="master")
        out.append(curve_of(record))
    return out


def test_span_matches_the_isothermal_closed_form() -> None:
    """No heat, no noise: the standard's loss is the ideal-gas mole balance. Moles leaving per
    second n' = p_std·Q/(R·T_std) (Q in m³/s at 0 °C, 101.325 kPa), pressure falling
    Δp = n'·Δt·R·T_gas/V (ideal gas law; R from scipy.constants, CODATA)."""
    c = TestConditions(volume_m3=250e-6, test_pressure_pa=350e3, stabilise_s=5.0, test_s=20.0,
                       leak_sccm=STANDARD, fixture_c=20.0)
    trace = simulate_trace(c, fill_s=1.0, interval_s=0.1)
    record = PressureTrace("L1-S1", "L1", 1, T0, T0, T0, 0.1, trace.pressures_pa, trace.phases)
    loss = float(window_losses([curve_of(record)], 5.0, 10.0)[0])
    q = STANDARD * 1e-6 / 60.0
    moles_per_s = 101_325.0 * q / (constants.R * 273.15)
    expected = moles_per_s * 10.0 * constants.R * 293.15 / 250e-6
    # laminar flow falls with the pressure (by ~0.1 % over the window): 0.5 % covers it
    assert loss == pytest.approx(expected, rel=5e-3)


def test_the_map_agrees_with_repeated_short_tests() -> None:
    master = _traces(SEAL, 30, seed=11)
    standard = _traces(SEAL + STANDARD, 8, seed=12)
    tolerance = 2.0  # sccm: the reject limit, one-sided (upper) convention
    result = backdown_map(master, standard, standard_sccm=STANDARD, tolerance_sccm=tolerance,
                          stabilise_s=[3.0, 8.0], test_s=[4.0, 10.0], fixed_s=3.0)
    assert result.n_master == 30 and not result.thin
    rng = random.Random(99)
    for point in result.points:
        s, t = point.stabilise_s, point.test_s
        zero = [simulate_test(_conditions(SEAL, rng, s, t), rng).loss_pa for _ in range(150)]
        full = [simulate_test(_conditions(SEAL + STANDARD, rng, s, t), rng).loss_pa
                for _ in range(30)]
        span = float(np.mean(full) - np.mean(zero))
        brute = 100.0 * K_SIGMA * float(np.std(zero, ddof=1)) * STANDARD / span / tolerance
        # 30 curves know σ to ±13 % (1 σ, chi-square); 150 brute-force tests to ±6 %
        assert point.pct_grr == pytest.approx(brute, rel=0.35), (s, t)
        # the spans differ by sampling alone: within 3 standard errors of the difference
        sd = float(np.std(zero, ddof=1))
        se = math.sqrt(2 * sd**2 / 30 + sd**2 / 8 + sd**2 / 150)
        assert abs(point.span_pa - span) < 3 * se, (s, t, point.span_pa, span, se)
        assert point.cycle_s == pytest.approx(s + t + 3.0)
    # a longer test has more signal against the same noise: its %GRR is lower
    by = {(p.stabilise_s, p.test_s): p.pct_grr for p in result.points}
    assert by[(8.0, 10.0)] < by[(8.0, 4.0)]


def test_the_map_chooses_the_shortest_cycle_that_meets_the_target() -> None:
    # a well-conditioned part (wall within 0.03 K of the fixture): noise, not thermal drift,
    # decides, so a longer test helps until the target is met
    master = _traces(SEAL, 12, seed=21, s=10.0, t=15.0, part_sd_k=0.03)
    standard = _traces(SEAL + STANDARD, 4, seed=22, s=10.0, t=15.0, part_sd_k=0.03)
    result = backdown_map(master, standard, standard_sccm=STANDARD, tolerance_sccm=2.0,
                          step_s=1.0, min_stabilise_s=1.0, min_test_s=1.0, target_pct=10.0)
    meeting = [p for p in result.points if p.verdict == "meets"]
    assert result.chosen is not None and meeting
    assert result.chosen.cycle_s == min(p.cycle_s for p in meeting)
    assert result.chosen.pct_grr_high <= 10.0
    assert any("span ∝ test time" in c and "holds" in c for c in result.checks)
    assert result.recorded_s == pytest.approx(25.0)


def test_thin_data_is_said_and_nothing_meets_an_impossible_target() -> None:
    master = _traces(SEAL, 4, seed=31, s=6.0, t=6.0)
    standard = _traces(SEAL + STANDARD, 2, seed=32, s=6.0, t=6.0)
    result = backdown_map(master, standard, standard_sccm=STANDARD, tolerance_sccm=0.05,
                          step_s=2.0, target_pct=1.0)
    assert result.thin and any("thin data" in n for n in result.notes)
    assert result.chosen is None
    with pytest.raises(ValueError, match="at least 3 master"):
        backdown_map(master[:2], standard, standard_sccm=STANDARD, tolerance_sccm=2.0)
