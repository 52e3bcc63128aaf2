"""The simulator's curves: the result's own test, no change to any result, part volume scatter.

The volume check is against the isothermal ideal-gas balance (a handbook formula: a standard
flow Q removes P_std·Q/(R·T_std) mol/s; at constant V and T the gauge pressure falls by
ΔP = P_std·Q·t·T/(T_std·V)), evaluated with pint, not with the simulator's own code."""

from __future__ import annotations

import dataclasses
import math
import random
import statistics
from datetime import UTC, datetime

import pint
import pytest

from sim.physics import TestConditions, simulate_test
from sim.scenario import load_scenario
from sim.station import SimResult, StationModel
from sim.traces import trace_of_test

START = datetime(2026, 12, 2, 5, 0, tzinfo=UTC)
UREG = pint.UnitRegistry()


def _model(**changes: object) -> StationModel:
    scenario = load_scenario("demo")
    station = dataclasses.replace(scenario.station("L1-S1"), **changes)  # type: ignore[arg-type]
    return StationModel(scenario, station, START)


def test_sending_curves_changes_no_result_and_each_curve_holds_its_results_loss() -> None:
    plain = _model(trace_interval_s=0.0).activities(200)
    traced = _model(trace_interval_s=0.1).activities(200)
    assert [a.record for a in plain] == [a.record for a in traced]
    curves = 0
    for a in traced:
        r = a.record
        if isinstance(r, SimResult) and r.verdict.value in ("pass", "reject"):
            ((role, cycle, tr),) = a.traces
            assert (role, cycle) == ("result", r.cycle)
            at = dict(tr.phases)
            i0, i1 = round(at["test"] / tr.interval_s), round(at["dump"] / tr.interval_s)
            assert tr.pressures_pa[i0] - tr.pressures_pa[i1] == pytest.approx(
                r.pressure_loss_pa, abs=1e-9)
            assert tr.pressures_pa[i0] == pytest.approx(r.test_pressure_pa, abs=1e-9)
            curves += 1
        elif isinstance(r, SimResult):
            assert a.traces == ()  # gross and aborted tests send no curve
        else:
            assert [role for role, _, _ in a.traces] == ["master", "standard"]
    assert curves > 150


def test_a_curve_shows_fill_heat_settling_before_the_test() -> None:
    c = TestConditions(volume_m3=250e-6, test_pressure_pa=350e3, stabilise_s=8, test_s=10,
                       leak_sccm=0.0, fixture_c=21.0, fill_heating_k=0.8, thermal_tau_s=2.5)
    tr = trace_of_test(c, simulate_test(c), fill_s=3.0, interval_s=0.1, rng=random.Random(1))
    at = dict(tr.phases)
    p = tr.pressures_pa
    iso, test = round(at["stabilise"] / 0.1), round(at["test"] / 0.1)
    early = p[iso] - p[iso + 20]  # first 2 s after isolation: the heat of fill leaving
    late = p[test] - p[test + 20]  # 2 s of the test, 8 s later: settled (e^-3.2 of it left)
    assert early > 20 * late > 0
    # with no leak, the fall over the stabilise time is the gas cooling by the fill's 0.8 K:
    # ΔP ≈ P_abs · ΔT / T (Gay-Lussac), times the share that decays in 8 s
    p_abs = 350e3 + 101_325.0
    expected = p_abs * 0.8 / (273.15 + 21.8) * (1 - math.exp(-8 / 2.5))
    assert p[iso] - p[test] == pytest.approx(expected, rel=0.05)


def test_part_volume_scatter_spreads_the_loss_as_the_ideal_gas_balance_says() -> None:
    q = UREG.Quantity(1.0, "cm**3/min")  # 1 sccm: standard conditions 0 °C, 101.325 kPa
    p_std, t_std, t = UREG.Quantity(101.325, "kPa"), UREG.Quantity(273.15, "K"), \
        UREG.Quantity(294.15, "K")
    for volume_cc in (200.0, 250.0, 300.0):
        v = UREG.Quantity(volume_cc, "cm**3")
        expected = (p_std * q * UREG.Quantity(10, "s") * t / (t_std * v)).to("Pa").magnitude
        c = TestConditions(volume_m3=volume_cc * 1e-6, test_pressure_pa=350e3, stabilise_s=0,
                           test_s=10, leak_sccm=1.0, fixture_c=21.0)
        assert simulate_test(c).loss_exact_pa == pytest.approx(expected, rel=0.02)
    # a program with 3 % volume scatter: the station, calibrated on the master's volume,
    # reads a leaking part's leak off by the volume ratio (a larger part loses less pressure).
    # The same parts come in the same order with and without scatter, so the paired ratio of
    # the two readings is the volume effect alone: its spread is the scatter.
    read: dict[float, dict[int, float]] = {}
    for scatter in (0.0, 0.03):
        scenario = load_scenario("demo")
        prog = dataclasses.replace(scenario.programs["HX-210"], volume_scatter=scatter)
        scenario = dataclasses.replace(scenario, programs={**scenario.programs, "HX-210": prog})
        model = StationModel(scenario, scenario.station("L1-S1"), START)
        read[scatter] = {a.record.cycle: a.record.leak_rate_sccm for a in model.activities(3000)
                         if isinstance(a.record, SimResult) and a.record.program == "HX-210"
                         and a.record.verdict.value == "reject" and a.record.true_leak_sccm > 2.0}
    pairs = [read[0.03][c] / read[0.0][c] for c in read[0.0]]
    assert len(pairs) > 20
    assert statistics.stdev(pairs) == pytest.approx(0.03, rel=0.35)
