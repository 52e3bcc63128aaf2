"""Test-time advice from master tests at several test times, checked against the simulator's
physics with part-temperature scatter (sim/physics.py), which the single-time advisor's
constant-noise assumption cannot see.

Each test's part starts a random 0–0.3 K away from the fixture (as parts from a washer or a
cold store do); its temperature drift makes a loss rate that scatters from part to part, so the
loss scatter grows in proportion to the test time. The advisor fits that growth from master
tests at 4, 8 and 16 s and predicts %GRR at 12 s; the simulator then measures it with fresh
tests. Tolerances: n = 200 readings per point give the σ about 5 % sampling error.
"""

from __future__ import annotations

import random
import statistics

import numpy as np
import pytest

from analytics.advice import advise_test_time, grr_at
from analytics.advice_fit import advise_from_times, fit_loss_noise
from gateway.calibration import Calibration
from sim.physics import TestConditions, simulate_test

pytestmark = pytest.mark.timeout(180)

VOLUME_M3, TEST_PA, STABILISE_S = 250e-6, 350_000.0, 8.0
STANDARD, SEAL, REJECT, LOWER = 3.0, 0.02, 2.0, -1.0
N = 200


def _loss(test_s: float, leak: float, rng: random.Random) -> float:
    offset = rng.gauss(0.0, 0.2)  # part wall vs fixture, K
    c = TestConditions(volume_m3=VOLUME_M3, test_pressure_pa=TEST_PA, stabilise_s=STABILISE_S,
                       test_s=test_s, leak_sccm=leak, fill_heating_k=0.8, thermal_tau_s=2.5,
                       part_offset_k=offset, part_tau_s=600.0, noise_pa=1.0,
                       resolution_pa=0.1)
    return simulate_test(c, rng).loss_pa


def _calibration(test_s: float, rng: random.Random) -> Calibration:
    master = [_loss(test_s, SEAL, rng) for _ in range(40)]
    standard = [_loss(test_s, SEAL + STANDARD, rng) for _ in range(40)]
    return Calibration(statistics.fmean(master), statistics.fmean(standard), STANDARD)


def test_the_noise_growth_is_measured_and_the_prediction_holds() -> None:
    rng = random.Random(20261203)
    times = (4.0, 8.0, 16.0)
    losses = {t: [_loss(t, SEAL, rng) for _ in range(N)] for t in times}
    cal8 = _calibration(8.0, rng)
    fit = fit_loss_noise(losses)
    assert fit.params["c"] > 0  # the part-temperature scatter shows as noise ∝ t
    advice = advise_from_times(losses, 8.0, cal8.sensitivity, REJECT - LOWER, target_pct=10.0,
                               reject_limit_sccm=REJECT, test_pressure_pa=TEST_PA)
    # the simulator at 12 s: fresh calibration and master tests
    cal12 = _calibration(12.0, rng)
    leaks = [cal12.leak_rate(_loss(12.0, SEAL, rng)) for _ in range(N)]
    measured = 100.0 * 6.0 * statistics.stdev(leaks) / (REJECT - LOWER)
    predicted = float(np.interp(12.0, advice.grid_s, advice.pct_grr))
    assert measured == pytest.approx(predicted, rel=0.2)
    # the single-time advisor (constant noise from 4 s) misses it by far
    single = advise_test_time(losses[4.0], 4.0, _calibration(4.0, rng).sensitivity, REJECT,
                              LOWER, target_pct=10.0)
    old = grr_at(12.0, 4.0, single.sigma_loss_pa, single.sensitivity, REJECT - LOWER).pct_grr
    assert abs(old - measured) / measured > 0.3
    # no extrapolation: the advice stays inside the tested times
    assert advice.longest_allowed_s <= 16.0
    assert advice.recommended_test_s is None or 4.0 <= advice.recommended_test_s <= 16.0


def test_one_test_time_is_refused_and_too_few_readings_too() -> None:
    with pytest.raises(ValueError, match="two or more test times"):
        fit_loss_noise({4.0: [1.0, 2.0, 3.0, 4.0, 5.0]})
    with pytest.raises(ValueError, match="at least 5"):
        fit_loss_noise({4.0: [1.0, 2.0], 8.0: [1.0, 2.0, 3.0, 4.0, 5.0]})


def test_the_physical_limit_caps_the_advice() -> None:
    rng = np.random.default_rng(1)
    losses = {t: list(rng.normal(0, 0.5 + 0.1 * t, 40)) for t in (4.0, 8.0, 16.0)}
    # a sensitivity so high that a reject-limit leak loses 10 % of the test pressure early
    advice = advise_from_times(losses, 8.0, 1e-4, 3.0, reject_limit_sccm=2.0,
                               test_pressure_pa=50_000.0)
    assert advice.longest_allowed_s < 16.0
    assert any("ASTM E2930" in a for a in advice.assumptions)


def test_the_report_reads_several_test_times(tmp_path) -> None:  # type: ignore[no-untyped-def]
    import json
    import subprocess
    import sys
    from pathlib import Path

    rng = np.random.default_rng(3)
    rows = ["test_s,loss"] + [f"{t},{v:.4f}" for t in (4, 8, 16)
                              for v in rng.normal(0.0, 0.3 + 0.05 * t, 60)]
    csv = tmp_path / "times.csv"
    csv.write_text("\n".join(rows) + "\n")
    root = Path(__file__).resolve().parents[2]
    out = subprocess.run([sys.executable, "-m", "gateway", "report", "advise", "--input",
                          str(csv), "--test-time", "8s", "--sensitivity", "0.01",
                          "--reject-limit", "2sccm", "--json"], capture_output=True, text=True,
                         cwd=root, timeout=60)
    assert out.returncode == 0, out.stderr
    doc = json.loads(out.stdout)["result"]
    assert doc["fit"]["times_s"] == [4.0, 8.0, 16.0] and doc["message"]
