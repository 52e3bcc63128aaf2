"""EWMA and CUSUM charts against published worked examples; calibration health alarms."""

from __future__ import annotations

import itertools
from datetime import UTC, datetime, timedelta

import numpy as np
import pandas as pd
import pytest

from analytics.drift import (
    HealthConfig,
    baseline,
    calibration_health,
    cusum_chart,
    ewma_chart,
    project_drift,
)

pytestmark = pytest.mark.timeout(60)

# NIST/SEMATECH e-Handbook of Statistical Methods, 6.3.2.4 "EWMA Control Charts", example:
# target 50, s = 2.0539, λ = 0.3, k = 3 → limits 52.5884 / 47.4116.
NIST_DATA = [52.0, 47.0, 53.0, 49.3, 50.1, 47.0, 51.0, 50.1, 51.2, 50.5,
             49.6, 47.6, 49.9, 51.3, 47.8, 51.2, 52.6, 52.4, 53.6, 52.1]  # fmt: skip
NIST_EWMA = [50.60, 49.52, 50.56, 50.18, 50.16, 49.21, 49.75, 49.85, 50.26, 50.33,
             50.11, 49.36, 49.52, 50.05, 49.38, 49.92, 50.73, 51.23, 51.94, 51.99]  # fmt: skip


def test_ewma_matches_nist_example() -> None:
    chart = ewma_chart(NIST_DATA, target=50.0, sigma=2.0539, lam=0.3, L=3.0, exact=False)
    assert [round(p.statistic, 2) for p in chart.points] == NIST_EWMA
    assert chart.points[0].upper == pytest.approx(52.5884, abs=1e-4)
    assert chart.points[0].lower == pytest.approx(47.4116, abs=1e-4)
    assert chart.signals == []  # the handbook: "the process is in control"


def test_exact_ewma_limits_grow_to_the_asymptote() -> None:
    # NIST 6.3.2.4: the exact variance factor is λ/(2−λ)·(1 − (1−λ)^{2i}).
    chart = ewma_chart(NIST_DATA, target=50.0, sigma=2.0539, lam=0.3, L=3.0, exact=True)
    half = [p.upper - 50.0 for p in chart.points]
    assert half[0] == pytest.approx(3 * 2.0539 * 0.3)  # i = 1: sqrt(λ/(2−λ)(1−(1−λ)²)) = λ
    assert all(a < b for a, b in itertools.pairwise(half))
    assert half[-1] == pytest.approx(2.5884, abs=1e-3)


# Montgomery & Runger, "Applied Statistics and Probability for Engineers", Example 16-6 "A
# Tabular CUSUM" (Tables 16-7/16-8): chemical process concentration, target 99, K = 1, H = 10
# (σ = 1, so k = 1σ, h = 10σ); the CUSUMs never exceed H.
MR_DATA = [102.0, 94.8, 98.3, 98.4, 102.0, 98.5, 99.0, 97.7, 100.0, 98.1,
           101.3, 98.7, 101.1, 98.4, 97.0, 96.7, 100.3, 101.4, 97.2, 101.0]  # fmt: skip
MR_UPPER = [2.0, 0.0, 0.0, 0.0, 2.0, 0.5, 0.0, 0.0, 0.0, 0.0,
            1.3, 0.0, 1.1, 0.0, 0.0, 0.0, 0.3, 1.7, 0.0, 1.0]  # fmt: skip
MR_LOWER = [0.0, 3.2, 2.9, 2.5, 0.0, 0.0, 0.0, 0.3, 0.0, 0.0,
            0.0, 0.0, 0.0, 0.0, 1.0, 2.3, 0.0, 0.0, 0.8, 0.0]  # fmt: skip


def test_cusum_matches_montgomery_runger_example() -> None:
    chart = cusum_chart(MR_DATA, target=99.0, sigma=1.0, k=1.0, h=10.0)
    assert [round(p.statistic, 1) for p in chart.points] == MR_UPPER
    assert [round(p.statistic_low or 0.0, 1) for p in chart.points] == MR_LOWER
    assert chart.signals == []


def test_cusum_signals_a_sustained_shift() -> None:
    # Common practice (NIST 6.3.2.3): k = 0.5σ, h = 5σ detects a 1σ shift within ~10 points.
    data = [0.0] * 20 + [1.0] * 15
    chart = cusum_chart(data, target=0.0, sigma=1.0)
    assert chart.signals and 20 <= chart.signals[0] < 32


def test_baseline_uses_moving_range() -> None:
    # σ from MR̄/d2, d2 = 1.128 (NIST e-Handbook 6.3.2.2, individuals chart).
    mean, sigma = baseline([1.0, 2.0, 1.0, 2.0])
    assert mean == 1.5 and sigma == pytest.approx(1.0 / 1.128)


T0 = datetime(2026, 3, 1, 6, 0, tzinfo=UTC)


def _calibrations(master: list[float], **overrides: object) -> pd.DataFrame:
    n = len(master)
    df = pd.DataFrame({
        "station": "L1-S1", "program": "HX-210",
        "ended_at": [T0 + timedelta(days=i) for i in range(n)],
        "master_loss_pa": master, "standard_loss_pa": [m + 40.0 for m in master],
        "ratio": [(m + 40.0) / m for m in master], "sensitivity": 5.0 / 40.0,
        "passed": True, "reason": "",
    })  # fmt: skip
    for k, v in overrides.items():
        df[k] = v
    return df


def test_drift_projection_linear() -> None:
    # Theil–Sen on an exact line: slope 0.5 Pa/day, 20 Pa on day 19 → 30 Pa 20 days later.
    master = [10.5 + 0.5 * i for i in range(20)]
    p = project_drift([T0 + timedelta(days=i) for i in range(20)], master, 30.0)
    assert p.status == "reaches limit"
    assert p.slope_per_day == pytest.approx(0.5)
    assert p.days_to_limit == pytest.approx(20.0)
    assert p.reaches_limit_at == T0 + timedelta(days=19 + 20)


def test_drift_projection_no_drift_and_insufficient() -> None:
    rng = np.random.default_rng(3)
    flat = list(10 + rng.normal(0, 0.2, 30))
    times = [T0 + timedelta(hours=8 * i) for i in range(30)]
    assert project_drift(times, flat, 30.0).status == "no drift"
    assert project_drift(times[:3], flat[:3], 30.0).status == "insufficient data"


def test_calibration_health_alarms() -> None:
    master = [10.0, 10.2, 9.9, 10.1, 10.0, 9.8, 10.1, 10.0, 10.2, 9.9] + [
        12.0 + 0.3 * i for i in range(10)
    ]
    df = _calibrations(master)
    df.loc[5, "passed"] = False
    df.loc[5, "reason"] = "standard loss out of window"
    df.loc[7, "ratio"] = 1.2
    health = calibration_health(df, HealthConfig(min_ratio=1.5, master_loss_limit_pa=20.0))
    kinds = {a.kind for a in health.alarms}
    assert {"ewma", "cusum", "failed", "ratio", "projection"} <= kinds
    series = health.series[0]
    assert series.n == 20 and "master_loss_pa" in series.charts
    failed = [a for a in health.alarms if a.kind == "failed"]
    assert failed[0].at == T0 + timedelta(days=5) and "out of window" in failed[0].message
    import json

    json.dumps(health.to_dict(), allow_nan=False)


def test_stable_calibrations_raise_no_chart_alarm() -> None:
    rng = np.random.default_rng(11)
    df = _calibrations(list(10 + rng.normal(0, 0.1, 25)))
    health = calibration_health(df, HealthConfig(master_loss_limit_pa=20.0))
    assert not [a for a in health.alarms if a.kind in ("ewma", "cusum", "projection")]


def test_cusum_signals_a_one_sigma_shift_within_its_published_run_length() -> None:
    # Tabular CUSUM with k = 0.5σ, h = 5σ: average run length about 10.4 samples for a 1σ
    # shift in the mean and about 465 in control (Montgomery, Introduction to Statistical
    # Quality Control, ARL table of the tabular CUSUM; values from memory). Data that really
    # signal: every run starts shifted by 1σ.
    rng = np.random.default_rng(20261203)
    runs = []
    for _ in range(2000):
        chart = cusum_chart(rng.normal(1.0, 1.0, 200), 0.0, 1.0, k=0.5, h=5.0)
        assert chart.signals, "a 1σ shift must signal within 200 samples"
        runs.append(chart.signals[0] + 1)
    assert float(np.mean(runs)) == pytest.approx(10.4, rel=0.08)
    quiet = [cusum_chart(rng.normal(0.0, 1.0, 60), 0.0, 1.0, k=0.5, h=5.0).signals
             for _ in range(300)]
    # in control, a signal within 60 samples is rare (ARL ≈ 465: about 12 % of runs at most)
    assert sum(bool(s) for s in quiet) / 300 < 0.2
