"""Pressure-decay physics of the simulator against closed forms from outside the simulator."""

from __future__ import annotations

import math
import random

import pytest
from scipy import constants

from gateway.calibration import expected_loss_pa
from sim.physics import P_ATM_PA, TestConditions, fill_pressure_pa, laminar_flow, simulate_test

V = 250e-6  # m³
P_TEST = 350e3  # Pa gauge


def _cond(**kw: float) -> TestConditions:
    base: dict[str, float] = {
        "volume_m3": V,
        "test_pressure_pa": P_TEST,
        "stabilise_s": 8.0,
        "test_s": 10.0,
        "fixture_c": 0.0,
    }
    base.update(kw)
    return TestConditions(**base)


@pytest.mark.parametrize("leak", [0.1, 1.0, 3.0])
@pytest.mark.parametrize("fixture_c", [0.0, 20.0])
def test_isothermal_loss_equals_closed_form(leak: float, fixture_c: float) -> None:
    # Q_std = V·ΔP/(Δt·P_std) (isothermal pressure decay, ASTM E2930's ideal-gas basis),
    # inverted by gateway.calibration.expected_loss_pa. The simulator's leak is laminar
    # (∝ P_abs² − P_atm²): once the pressure has fallen by ΔP its flow is lower by about
    # 2·ΔP/P_abs, i.e. < 0.2 % for these leaks, hence rel=2e-3.
    out = simulate_test(_cond(leak_sccm=leak, fixture_c=fixture_c))
    expected = expected_loss_pa(V, leak, 10.0, gas_temperature_c=fixture_c)
    assert out.loss_pa == pytest.approx(expected, rel=2e-3)
    assert out.loss_pa == out.loss_exact_pa  # no noise, no quantisation


def test_loss_matches_mole_balance_with_scipy_gas_constant() -> None:
    # Independent check: n = pV/(RT) with scipy.constants.R; a leak of Q sccm removes
    # P_std·Q/(R·T_std) mol per minute (sccm at 0 °C, 101.325 kPa, stated in gateway.units).
    leak, t_gas = 2.0, 293.15
    mol_per_s = constants.atm * (leak * 1e-6 / 60) / (constants.R * 273.15)
    dn = mol_per_s * 10.0
    dp = dn * constants.R * t_gas / V
    out = simulate_test(_cond(leak_sccm=leak, fixture_c=20.0))
    assert out.loss_pa == pytest.approx(dp, rel=1e-3)


def test_thermal_transient_decays_with_its_time_constant() -> None:
    # Gas heated by fill cools as ΔT0·exp(−t/τ); pressure follows ΔP/P = ΔT/T (gas law).
    # So the thermal loss over equal consecutive windows shrinks by exp(−Δ/τ).
    tau, window = 2.5, 2.0
    losses = [
        simulate_test(
            _cond(
                fill_heating_k=0.8, thermal_tau_s=tau, stabilise_s=4.0 + k * window, test_s=window
            )
        ).loss_pa
        for k in range(3)
    ]
    assert losses[1] / losses[0] == pytest.approx(math.exp(-window / tau), rel=2e-3)
    assert losses[2] / losses[1] == pytest.approx(math.exp(-window / tau), rel=2e-3)
    # and the size: P_abs·ΔT/T for the temperature drop over the first window
    t_k = 273.15
    p_abs = P_TEST + P_ATM_PA
    drop_k = 0.8 * (math.exp(-4.0 / tau) - math.exp(-6.0 / tau))
    assert losses[0] == pytest.approx(p_abs * drop_k / t_k, rel=5e-3)


def test_doubled_test_time_roughly_doubles_the_leak_share() -> None:
    # Common practice: a longer test window lets the (constant) leak loss grow linearly while
    # the decaying thermal part adds little, so the leak's share of the signal doubles.
    def parts(test_s: float) -> tuple[float, float]:
        thermal = simulate_test(_cond(fill_heating_k=0.8, test_s=test_s)).loss_pa
        total = simulate_test(_cond(fill_heating_k=0.8, test_s=test_s, leak_sccm=0.5)).loss_pa
        return total - thermal, thermal

    leak10, thermal10 = parts(10.0)
    leak20, thermal20 = parts(20.0)
    assert leak20 / leak10 == pytest.approx(2.0, rel=0.01)
    assert thermal20 / thermal10 < 1.1
    assert (leak20 / thermal20) / (leak10 / thermal10) == pytest.approx(2.0, rel=0.1)


def test_warm_part_reads_high_and_cool_part_negative() -> None:
    # A part warmer than the fixture cools during the test (extra loss); a cooler one warms and
    # the pressure rises: a negative loss, the usual cause of negative readings.
    warm = simulate_test(_cond(part_offset_k=1.0, fixture_c=20.0)).loss_pa
    cool = simulate_test(_cond(part_offset_k=-1.0, fixture_c=20.0)).loss_pa
    assert warm > 0 > cool
    # magnitude: P·(ΔT/τ_part)·t/T for a slow wall relaxation (τ = 600 s ≫ the test)
    approx = (P_TEST + P_ATM_PA) * (1.0 / 600.0) * math.exp(-8.0 / 600) * 10.0 / 293.15
    assert warm == pytest.approx(approx, rel=0.02)


def test_noise_and_resolution() -> None:
    rng = random.Random(7)
    outs = [
        simulate_test(_cond(leak_sccm=1.0, noise_pa=0.5, resolution_pa=0.1), rng)
        for _ in range(200)
    ]
    for out in outs:
        assert out.pressure_at_test_start_pa / 0.1 == pytest.approx(
            round(out.pressure_at_test_start_pa / 0.1), abs=1e-6
        )
    errors = [o.loss_pa - o.loss_exact_pa for o in outs]
    mean = sum(errors) / len(errors)
    sd = math.sqrt(sum((e - mean) ** 2 for e in errors) / (len(errors) - 1))
    assert abs(mean) < 0.15
    assert sd == pytest.approx(0.5 * math.sqrt(2), rel=0.2)  # difference of two noisy readings


def test_laminar_flow_and_fill() -> None:
    # Laminar (viscous) flow through a leak path scales with P_in² − P_out² (Hagen–Poiseuille
    # for a compressible gas).
    assert laminar_flow(2.0, P_TEST, P_TEST + P_ATM_PA) == pytest.approx(2.0)
    assert laminar_flow(2.0, P_TEST, P_ATM_PA) == 0.0
    half = P_TEST / 2 + P_ATM_PA
    ref = P_TEST + P_ATM_PA
    assert laminar_flow(2.0, P_TEST, half) == pytest.approx(
        2.0 * (half**2 - P_ATM_PA**2) / (ref**2 - P_ATM_PA**2)
    )
    assert fill_pressure_pa(P_TEST, 0.0, 4000.0) == P_TEST
    assert fill_pressure_pa(P_TEST, 1000.0, 4000.0) == pytest.approx(P_TEST / 1.25)
