"""Test-time advice from master tests at two or more test times: the noise growth measured,
not assumed (pure).

How the scatter of a good part's loss grows with the test time decides how short a test can
be, and one test time cannot show it: transducer noise and quantisation stay constant, white
noise integrating over the test grows like √t, and a part whose temperature differs from the
fixture's by a scattered amount drifts at a scattered rate, so its loss scatters in proportion
to t. With master-part losses at several test times the variance is fitted as

    σ²(t) = a + b·t + c·t²     (a, b, c ≥ 0; with two test times: a + c·t²)

by weighted non-negative least squares (the sampling variance of s² is 2σ⁴/(n − 1)), and
its uncertainty by resampling each time's readings (bootstrap). The leak-rate noise at t is
σ(t)·S(t) with the calibration's sensitivity S(t) = S0·t0/t (the pressure-decay law), and
%GRR = 100·6·σ_leak/tolerance. The advice stays within the tested times (no extrapolation)
and below the physical limit: the loss of a leak at the reject limit kept under a share of
the test pressure (about 10 %, ASTM E2930).
"""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from dataclasses import dataclass

import numpy as np
from scipy import optimize

from analytics._result import ResultMixin

__all__ = ["MultiTimeAdvice", "NoiseFit", "advise_from_times", "fit_loss_noise"]


@dataclass(frozen=True, slots=True)
class NoiseFit(ResultMixin):
    times_s: list[float]
    n: list[int]
    sigma_pa: list[float]  # the measured σ of the loss at each tested time
    model: str
    params: dict[str, float]  # a (Pa²), b (Pa²/s), c (Pa²/s²)

    def sigma_at(self, t: float) -> float:
        p = self.params
        return math.sqrt(max(0.0, p["a"] + p["b"] * t + p["c"] * t * t))


@dataclass(frozen=True, slots=True)
class MultiTimeAdvice(ResultMixin):
    fit: NoiseFit
    target_pct: float
    tolerance_sccm: float
    grid_s: list[float]
    pct_grr: list[float]  # the fit's %GRR at each grid time
    pct_grr_upper: list[float]  # its upper 95 % bound (bootstrap)
    recommended_test_s: float | None
    longest_allowed_s: float  # the longest tested time, or the physical limit if shorter
    message: str
    assumptions: list[str]


def _design(times: np.ndarray, three: bool) -> np.ndarray:
    cols = [np.ones_like(times), times, times**2] if three else [np.ones_like(times), times**2]
    return np.column_stack(cols)


def _fit_params(times: np.ndarray, variances: np.ndarray, n: np.ndarray) -> dict[str, float]:
    three = times.size >= 3
    weights = np.sqrt((n - 1) / (2.0 * np.maximum(variances, 1e-300) ** 2))
    x = _design(times, three) * weights[:, None]
    coef, _ = optimize.nnls(x, variances * weights)
    if three:
        return {"a": float(coef[0]), "b": float(coef[1]), "c": float(coef[2])}
    return {"a": float(coef[0]), "b": 0.0, "c": float(coef[1])}


def fit_loss_noise(losses_by_time: Mapping[float, Sequence[float]]) -> NoiseFit:
    """σ²(t) of the master part's loss from its readings at two or more test times."""
    groups = {float(t): np.asarray(v, dtype=float) for t, v in losses_by_time.items()}
    groups = {t: v[np.isfinite(v)] for t, v in groups.items()}
    if len(groups) < 2:
        raise ValueError("the noise growth needs master tests at two or more test times")
    if any(v.size < 5 for v in groups.values()):
        raise ValueError("each test time needs at least 5 master-part readings")
    times = np.array(sorted(groups))
    n = np.array([groups[t].size for t in times], dtype=float)
    variances = np.array([groups[t].var(ddof=1) for t in times])
    params = _fit_params(times, variances, n)
    model = ("σ² = a + b·t + c·t²" if times.size >= 3 else "σ² = a + c·t²") + \
        " (constant, √t and ∝ t parts of the loss noise; weighted NNLS)"
    return NoiseFit([float(t) for t in times], [int(k) for k in n],
                    [float(math.sqrt(v)) for v in variances], model, params)


def advise_from_times(
    losses_by_time: Mapping[float, Sequence[float]],
    calibration_test_s: float,
    sensitivity: float,
    tolerance_sccm: float,
    *,
    target_pct: float = 10.0,
    reject_limit_sccm: float | None = None,
    test_pressure_pa: float | None = None,
    max_loss_share: float = 0.10,
    draws: int = 400,
    seed: int = 20261203,
) -> MultiTimeAdvice:
    """The shortest tested-range test time whose %GRR (upper 95 % bound) meets the target."""
    if sensitivity <= 0 or calibration_test_s <= 0 or tolerance_sccm <= 0:
        raise ValueError("sensitivity, calibration test time and tolerance must be > 0")
    fit = fit_loss_noise(losses_by_time)
    lo, hi = fit.times_s[0], fit.times_s[-1]
    limit = hi
    notes = []
    if reject_limit_sccm is not None and test_pressure_pa is not None and test_pressure_pa > 0:
        # loss of a leak at the reject limit: reject / S(t) = reject·t/(S0·t0)
        t_phys = max_loss_share * test_pressure_pa * sensitivity * calibration_test_s \
            / reject_limit_sccm
        if t_phys < limit:
            limit = t_phys
            notes.append(f"a leak at the reject limit would lose more than {max_loss_share:.0%} "
                         f"of the test pressure beyond {t_phys:.3g} s (ASTM E2930)")
    grid = np.linspace(lo, max(lo, limit), 60)
    s_at = sensitivity * calibration_test_s / grid

    def pct(params: Mapping[str, float]) -> np.ndarray:
        var = params["a"] + params["b"] * grid + params["c"] * grid**2
        return 100.0 * 6.0 * np.sqrt(np.maximum(var, 0.0)) * s_at / tolerance_sccm

    central = pct(fit.params)
    rng = np.random.default_rng(seed)
    groups = {float(t): np.asarray(v, dtype=float) for t, v in losses_by_time.items()}
    times = np.array(fit.times_s)
    n = np.array(fit.n, dtype=float)
    boot = np.empty((draws, grid.size))
    for i in range(draws):
        variances = np.array([rng.choice(groups[t], groups[t].size).var(ddof=1) for t in times])
        boot[i] = pct(_fit_params(times, variances, n))
    upper = np.quantile(boot, 0.95, axis=0)
    ok = np.nonzero(upper <= target_pct)[0]
    if ok.size:
        recommended: float | None = float(grid[ok[0]])
        message = (f"{recommended:.3g} s meets {target_pct:g} % %GRR at its upper 95 % bound "
                   f"(tested {lo:g}–{hi:g} s)")
    else:
        recommended = None
        message = (f"no test time from {lo:g} to {limit:.3g} s meets {target_pct:g} %: the "
                   "fit is not extrapolated; test the master part at longer times (or improve "
                   "the fixture, the part's temperature or the reject limit)")
    return MultiTimeAdvice(
        fit=fit, target_pct=target_pct, tolerance_sccm=tolerance_sccm,
        grid_s=[float(t) for t in grid], pct_grr=[float(v) for v in central],
        pct_grr_upper=[float(v) for v in upper], recommended_test_s=recommended,
        longest_allowed_s=float(limit), message=message,
        assumptions=[
            fit.model,
            "sensitivity S(t) = S0·t0/t (pressure-decay law, loss small against the test "
            "pressure)",
            "the master part's repeatability is the whole gauge variation (automated "
            "station, no operator effect)",
            "advice only within the tested times: the growth of the noise beyond them is "
            "unknown",
            *notes,
        ],
    )
