"""Test-time advice (closed-form model checks) and master-part qualification."""

from __future__ import annotations

import json
import math

import numpy as np
import pandas as pd
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy import optimize

from analytics.advice import advise_test_time, grr_at
from analytics.master import qualify_master

pytestmark = pytest.mark.timeout(60)

# Pressure-decay law (ASTM E2930 ideal-gas basis; docs/sources.md): loss ∝ leak × test time, so a
# sensitivity S0 sccm/Pa at t0 becomes S0·t0/t. %GRR = 6σ_leak/tolerance (AIAG MSA 4th ed.).


def _losses(sigma: float, n: int = 30, seed: int = 0) -> np.ndarray:
    x = np.random.default_rng(seed).normal(0.0, 1.0, n)
    return 12.0 + sigma * (x - x.mean()) / x.std(ddof=1)  # exact sample σ


def test_constant_noise_scales_as_one_over_time() -> None:
    a = advise_test_time(_losses(0.5), test_s=4.0, sensitivity=0.05, reject_limit_sccm=2.0)
    expected_now = 100 * 6 * 0.5 * 0.05 / 2.0  # 7.5 %
    assert a.current_pct_grr == pytest.approx(expected_now)
    assert a.meets_target_now
    # 10 % target: t = t0·GRR0/target = 4·7.5/10 = 3.0 s.
    assert a.recommended_test_s == pytest.approx(3.0)
    for p in a.curve:
        assert p.pct_grr == pytest.approx(expected_now * 4.0 / p.test_s)
    assert "sensitivity ∝ 1/t" in a.assumptions
    json.dumps(a.to_dict(), allow_nan=False)


def test_tolerance_uses_lower_limit() -> None:
    a = advise_test_time(_losses(0.5), 4.0, 0.05, reject_limit_sccm=2.0, lower_limit_sccm=-2.0)
    assert a.tolerance_sccm == 4.0 and a.current_pct_grr == pytest.approx(3.75)


@settings(max_examples=50, deadline=None)
@given(f=st.floats(0.0, 1.0), sigma=st.floats(0.05, 5.0), target=st.floats(2.0, 30.0))
def test_recommendation_solves_the_model(f: float, sigma: float, target: float) -> None:
    # Independent check: scipy's brentq root of %GRR(t) − target on the same model.
    a = advise_test_time(
        _losses(sigma), 5.0, 0.02, 3.0, target_pct=target, sqrt_fraction=f, step_s=1e-6
    )
    assert a.recommended_test_s is not None

    def gap(t: float) -> float:
        return grr_at(t, 5.0, a.sigma_loss_pa, 0.02, 3.0, f).pct_grr - target

    root = optimize.brentq(gap, 1e-6, 1e6)
    assert a.recommended_test_s == pytest.approx(root, rel=1e-4, abs=2e-6)
    assert a.conservative_test_s is not None and a.conservative_test_s >= a.recommended_test_s


def test_unreachable_target_within_max_time() -> None:
    a = advise_test_time(_losses(5.0), 2.0, 0.1, 1.0, max_test_s=10.0)
    assert a.recommended_test_s is None and "not reachable" in a.note


def test_sigma_upper_bound_is_chi_square() -> None:
    from scipy import stats

    a = advise_test_time(_losses(1.0, n=10), 2.0, 0.1, 1.0)
    assert a.sigma_loss_upper_pa == pytest.approx(math.sqrt(9 / stats.chi2.ppf(0.025, 9)))
    assert "only 10" not in a.note and a.n == 10


def _candidates() -> pd.DataFrame:
    rng = np.random.default_rng(9)
    rows = []
    for part, mean, sd in (
        ("M1", -0.30, 0.02),
        ("M2", -0.42, 0.10),
        ("M3", -0.35, 0.025),
        ("M4", 0.1, 0.02),
    ):
        z = rng.normal(0.0, 1.0, 10)
        for v in mean + sd * (z - z.mean()) / z.std(ddof=1):  # exact sample mean and std
            rows.append({"part": part, "value": v})
    rows.append({"part": "M5", "value": -0.9})  # one reading only
    return pd.DataFrame(rows)


def test_master_pick_is_lowest_among_tight() -> None:
    sel = qualify_master(_candidates())
    by = {c.part: c for c in sel.candidates}
    assert sel.chosen == "M3"  # M2 reads lower but repeats loosely; M5 has one reading
    assert not by["M2"].eligible and "loosely" in by["M2"].reason
    assert not by["M5"].eligible and by["M5"].rank_mean == 1
    assert [c.part for c in sel.candidates][:3] == ["M5", "M2", "M3"]
    assert sel.runner_up == "M1" and sel.welch_p is not None and sel.welch_p < 0.05
    json.dumps(sel.to_dict(), allow_nan=False)


def test_master_missing_column() -> None:
    with pytest.raises(ValueError, match="'part'"):
        qualify_master(pd.DataFrame({"value": [1.0]}))


def test_moving_range_sigma_ignores_slow_drift() -> None:
    # σ = MR̄/1.128 (NIST e-Handbook 6.3.2.2): a linear creep adds nothing to the moving range.
    noise = np.array([0.2, -0.2] * 10)
    creeping = 10 + noise + 0.5 * np.arange(20)
    a = advise_test_time(creeping, 4.0, 0.05, 2.0, sigma_method="moving-range")
    assert a.sigma_loss_pa == pytest.approx(float(np.abs(np.diff(creeping)).mean()) / 1.128)
    assert a.sigma_loss_pa < advise_test_time(creeping, 4.0, 0.05, 2.0).sigma_loss_pa / 3


def test_master_pick_finds_the_truly_lowest_part_most_of_the_time() -> None:
    # candidates with close true means and equal scatter, 5 readings each: the truly lowest
    # must be picked most of the time (a rule that discards candidates on a ratio of two
    # small-sample standard deviations keeps only a few and misses it)
    rng = np.random.default_rng(5)
    truths = {"A": -0.40, "B": -0.36, "C": -0.33, "D": -0.30, "E": -0.25, "F": -0.20}
    hits = 0
    for _ in range(150):
        rows = [{"part": p, "value": v} for p, m in truths.items()
                for v in rng.normal(m, 0.03, 5)]
        hits += qualify_master(pd.DataFrame(rows)).chosen == "A"
    assert hits / 150 > 0.7


def test_master_repeats_needed_match_a_power_calculation() -> None:
    # n per group for a two-sided 5 % test with 80 % power (statsmodels NormalIndPower)
    from statsmodels.stats.power import NormalIndPower

    rows = [{"part": p, "value": m + d} for p, m in (("A", -0.40), ("B", -0.39))
            for d in (-0.02, 0.0, 0.02, -0.01, 0.01)]
    sel = qualify_master(pd.DataFrame(rows))
    sigma = float(np.std([-0.02, 0.0, 0.02, -0.01, 0.01], ddof=1))
    n = NormalIndPower().solve_power(effect_size=0.01 / sigma, alpha=0.05, power=0.8, ratio=1)
    assert sel.repeats_needed == math.ceil(n)
    assert sel.confidence is not None and sel.confidence < 0.95 and "readings per" in sel.note
