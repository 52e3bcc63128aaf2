"""Test-time advice: how %GRR against the reject limit changes with test time.

The input is what a station already produces: a master part tested repeatedly at the current
test time t0 (its losses in Pa) and the calibration's sensitivity at t0 (sccm per Pa of loss).

Model (stated in every result's ``assumptions``):
- A leak of constant flow makes a loss that grows in proportion to the test time (pressure-decay
  law ``Q_std = V·ΔP/(Δt·P_std)`` with ΔP small against the test pressure), so the sensitivity
  at time t is ``S(t) = S0·t0/t``.
- The scatter of the master part's loss is measurement noise (transducer, quantisation,
  residual thermal transient), by default independent of the test time. Optionally a share
  ``f`` of the variance at t0 is white noise integrating over the test, growing ∝ t:
  ``σ_loss(t)² = σ0²·((1 − f) + f·t/t0)``.
- The leak-rate noise is ``σ_leak(t) = σ_loss(t)·S(t)``; %GRR = 100·6·σ_leak / tolerance, with
  tolerance = reject limit − lower limit (or the reject limit alone). The master part's
  repeatability is the whole gauge variation (automated station, no operator effect).

With constant noise %GRR ∝ 1/t, so ``t = t0·GRR0/target``; with the √t part the shortest time
solves ``sqrt((1−f) + f·x)/x = target/GRR0`` for x = t/t0. A conservative time uses the upper
confidence bound of σ0 (chi-square, n − 1 degrees of freedom).
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass
from typing import Literal

import numpy as np
from scipy import stats

from analytics._result import ResultMixin

__all__ = ["AdvicePoint", "TestTimeAdvice", "advise_test_time", "grr_at"]


@dataclass(frozen=True, slots=True)
class AdvicePoint(ResultMixin):
    test_s: float
    sigma_loss_pa: float
    sensitivity: float
    sigma_leak_sccm: float
    pct_grr: float


@dataclass(frozen=True, slots=True)
class TestTimeAdvice(ResultMixin):
    __test__ = False  # not a pytest class

    n: int
    current_test_s: float
    sigma_loss_pa: float
    sigma_loss_upper_pa: float
    sigma_method: str
    sensitivity: float
    tolerance_sccm: float
    current_pct_grr: float
    target_pct: float
    sqrt_fraction: float
    recommended_test_s: float | None
    conservative_test_s: float | None
    meets_target_now: bool
    curve: list[AdvicePoint]
    assumptions: str
    note: str


def _x_for_ratio(ratio: float, f: float) -> float:
    """x = t/t0 with sqrt((1−f) + f·x)/x = ratio (ratio = target / current %GRR)."""
    if f <= 0:
        return 1.0 / ratio
    r2 = ratio * ratio
    return (f + math.sqrt(f * f + 4.0 * r2 * (1.0 - f))) / (2.0 * r2)


def grr_at(
    test_s: float, t0: float, sigma0: float, s0: float, tolerance: float, f: float = 0.0
) -> AdvicePoint:
    """Predicted point of the curve at ``test_s``."""
    x = test_s / t0
    sigma_loss = sigma0 * math.sqrt((1.0 - f) + f * x)
    sens = s0 / x
    sigma_leak = sigma_loss * sens
    return AdvicePoint(test_s, sigma_loss, sens, sigma_leak, 100.0 * 6.0 * sigma_leak / tolerance)


_ASSUMPTIONS = (
    "the leak's pressure loss grows in proportion to test time (constant flow, loss small "
    "against the test pressure), so sensitivity ∝ 1/t; the master part's loss scatter is "
    "measurement noise {noise}; the master part's repeatability is the whole gauge variation "
    "(no operator effect, thermal transient after fill settled at every test time considered); "
    "%GRR = 6·σ_leak / tolerance. From one test time the growth of the noise is assumed, not "
    "measured (part-temperature scatter grows it in proportion to t): master tests at two or "
    "more test times measure it (analytics.advice_fit; report advise --input test_s,loss)"
)


def advise_test_time(
    losses_pa: Sequence[float] | np.ndarray,
    test_s: float,
    sensitivity: float,
    reject_limit_sccm: float,
    lower_limit_sccm: float | None = None,
    *,
    target_pct: float = 10.0,
    sqrt_fraction: float = 0.0,
    confidence: float = 0.95,
    min_test_s: float | None = None,
    max_test_s: float | None = None,
    step_s: float = 0.1,
    points: int = 40,
    sigma_method: Literal["std", "moving-range"] = "std",
) -> TestTimeAdvice:
    """Predict %GRR vs test time and recommend the shortest time meeting ``target_pct``."""
    x = np.asarray(losses_pa, dtype=float)
    x = x[np.isfinite(x)]
    n = int(x.size)
    if n < 3:
        raise ValueError(f"test-time advice needs at least 3 master-part losses, got {n}")
    if not test_s > 0:
        raise ValueError(f"current test time must be > 0 s, got {test_s}")
    if not sensitivity > 0:
        raise ValueError(f"sensitivity must be > 0 sccm/Pa, got {sensitivity}")
    if not 0.0 <= sqrt_fraction <= 1.0:
        raise ValueError(f"sqrt_fraction must be within 0..1, got {sqrt_fraction}")
    if not target_pct > 0:
        raise ValueError(f"target %GRR must be > 0, got {target_pct}")
    tolerance = (
        reject_limit_sccm - lower_limit_sccm if lower_limit_sccm is not None else reject_limit_sccm
    )
    if not tolerance > 0:
        raise ValueError(f"tolerance (reject limit − lower limit) must be > 0, got {tolerance}")
    if sigma_method == "std":
        sigma0, dof = float(x.std(ddof=1)), float(n - 1)
    elif sigma_method == "moving-range":
        # MR̄/d2 (d2 = 1.128) ignores slow drift between tests; its precision is that of about
        # 0.62·(n − 1) degrees of freedom (common approximation for individuals, from memory).
        sigma0, dof = float(np.abs(np.diff(x)).mean()) / 1.128, 0.62 * (n - 1)
    else:
        raise ValueError(f"sigma_method must be 'std' or 'moving-range', got {sigma_method!r}")
    if sigma0 <= 0:
        raise ValueError("the master part's losses do not vary: noise cannot be estimated")
    chi_low = float(stats.chi2.ppf((1.0 - confidence) / 2.0, dof))
    sigma_hi = sigma0 * math.sqrt(dof / chi_low)
    now = grr_at(test_s, test_s, sigma0, sensitivity, tolerance, sqrt_fraction)
    f = sqrt_fraction

    def recommend(sigma: float) -> float:
        grr0 = 100.0 * 6.0 * sigma * sensitivity / tolerance
        t = test_s * _x_for_ratio(target_pct / grr0, f)
        t = math.ceil(t / step_s - 1e-9) * step_s
        if min_test_s is not None:
            t = max(t, min_test_s)
        return round(t, 10)

    rec, cons = recommend(sigma0), recommend(sigma_hi)
    lo = min_test_s if min_test_s is not None else min(rec, test_s) / 2.0
    hi = max_test_s if max_test_s is not None else max(cons, test_s) * 1.5
    grid = sorted({*np.linspace(lo, hi, points).round(6).tolist(), test_s, rec})
    curve = [grr_at(t, test_s, sigma0, sensitivity, tolerance, f) for t in grid if t > 0]
    notes = []
    if max_test_s is not None and rec > max_test_s:
        notes.append(f"target {target_pct:g} % not reachable within {max_test_s:g} s")
        rec_out: float | None = None
    else:
        rec_out = rec
    cons_out = None if max_test_s is not None and cons > max_test_s else cons
    if n < 10:
        notes.append(
            f"only {n} master-part tests: σ is uncertain (upper bound ×{sigma_hi / sigma0:.2f})"
        )
    noise = (
        "independent of test time"
        if f == 0
        else f"with {f:.0%} of its variance at {test_s:g} s growing ∝ test time (white noise)"
    )
    return TestTimeAdvice(
        n=n,
        current_test_s=test_s,
        sigma_loss_pa=sigma0,
        sigma_loss_upper_pa=sigma_hi,
        sigma_method=sigma_method,
        sensitivity=sensitivity,
        tolerance_sccm=tolerance,
        current_pct_grr=now.pct_grr,
        target_pct=target_pct,
        sqrt_fraction=f,
        recommended_test_s=rec_out,
        conservative_test_s=cons_out,
        meets_target_now=now.pct_grr <= target_pct,
        curve=curve,
        assumptions=_ASSUMPTIONS.format(noise=noise),
        note="; ".join(notes),
    )
