"""Leak readings against their limits: histogram, guard band, one-sided capability, ppm.

A leak test has an upper (reject) limit and sometimes a lower limit for readings that are
implausibly negative, so capability is one-sided: ``Ppu = (USL − mean) / (3·s)`` with the
overall standard deviation, ``Cpu`` the same with the short-term (within) sigma estimated from
the average moving range (``MR̄ / d2``, d2 = 1.128 for n = 2; NIST/SEMATECH e-Handbook 6.3.2,
individuals charts). Confidence interval by Bissell's normal approximation,
``Ĉ ± z·sqrt(1/(9n) + Ĉ²/(2(n−1)))`` (NIST/SEMATECH e-Handbook 6.1.6, "Confidence intervals for
Cpk", which is built from the one-sided indices). Expected fraction above the limit for a
normal process: ``ppm = 1e6·(1 − Φ(3·Cpu))``.

Leak readings are usually right-skewed (most parts are tight, a few leak), so the normal figures
are checked with Shapiro–Wilk and Anderson–Darling, and a non-normal estimate is always given:
a three-parameter lognormal fitted to the data, with the percentile method of ISO 22514-2
(``Ppu = (USL − X50) / (X99.865 − X50)``); the note says which model the data support.
"""

from __future__ import annotations

import math
import warnings
from collections.abc import Sequence
from dataclasses import dataclass
from typing import Any, Literal

import numpy as np
from scipy import stats

from analytics._result import ResultMixin

__all__ = [
    "D2_N2",
    "CapabilityReport",
    "Histogram",
    "IndexEstimate",
    "NonNormalEstimate",
    "bissell_interval",
    "capability",
    "capability_from_summary",
    "fixed_edges",
    "guard_band_share",
    "histogram",
    "histogram_from_counts",
    "ppm_above",
]

D2_N2 = 1.128  # d2 for moving ranges of two consecutive points (NIST e-Handbook 6.3.2.2)
_P_UPPER = stats.norm.cdf(3.0)  # 0.99865: the +3σ quantile level used by the percentile method


def ppm_above(index_upper: float) -> float:
    """Expected parts per million above the limit for a normal process with this Cpu/Ppu."""
    return 1e6 * float(stats.norm.sf(3.0 * index_upper))


def bissell_interval(index: float, n: int, confidence: float = 0.95) -> tuple[float, float]:
    """Two-sided confidence interval of a one-sided capability index (Bissell 1990)."""
    if n < 2:
        return (math.nan, math.nan)
    z = float(stats.norm.ppf(0.5 + confidence / 2.0))
    half = z * math.sqrt(1.0 / (9.0 * n) + index * index / (2.0 * (n - 1)))
    return (index - half, index + half)


@dataclass(frozen=True, slots=True)
class Histogram(ResultMixin):
    """Counts between ``edges``; readings outside the edges in ``under`` / ``over``."""

    edges: list[float]
    counts: list[int]
    under: int
    over: int
    method: str
    reject_limit: float | None = None
    lower_limit: float | None = None


def histogram(
    values: Sequence[float] | np.ndarray,
    *,
    method: Literal["fd", "fixed"] = "fd",
    bins: int = 30,
    lo: float | None = None,
    hi: float | None = None,
    reject_limit: float | None = None,
    lower_limit: float | None = None,
    max_bins: int = 200,
) -> Histogram:
    """Histogram bins by Freedman–Diaconis (2·IQR·n^(−1/3) wide, capped) or a fixed number.

    The range reaches the reject limit (and lower limit) when those lie beyond the data, so the
    chart shows where the readings sit against them.
    """
    x = _clean(values)
    if x.size == 0:
        return Histogram([], [], 0, 0, method, reject_limit, lower_limit)
    low = float(np.min(x)) if lo is None else lo
    high = float(np.max(x)) if hi is None else hi
    if lo is None and lower_limit is not None:
        low = min(low, lower_limit)
    if hi is None and reject_limit is not None:
        high = max(high, reject_limit)
    if high <= low:
        high = low + (abs(low) * 1e-3 or 1e-3)
    if method == "fd":
        q75, q25 = np.percentile(x, [75, 25])
        width = 2.0 * (q75 - q25) / np.cbrt(x.size)
        n_bins = int(np.ceil((high - low) / width)) if width > 0 else bins
        n_bins = max(1, min(n_bins, max_bins))
    elif method == "fixed":
        if bins < 1:
            raise ValueError(f"bins must be >= 1, got {bins}")
        n_bins = bins
    else:
        raise ValueError(f"histogram method must be 'fd' or 'fixed', got {method!r}")
    edges = np.linspace(low, high, n_bins + 1)
    inside = x[(x >= low) & (x <= high)]
    counts, _ = np.histogram(inside, bins=edges)
    return Histogram(
        edges=[float(e) for e in edges],
        counts=[int(c) for c in counts],
        under=int((x < low).sum()),
        over=int((x > high).sum()),
        method=method,
        reject_limit=reject_limit,
        lower_limit=lower_limit,
    )


def fixed_edges(
    lo: float,
    hi: float,
    bins: int = 30,
    *,
    reject_limit: float | None = None,
    lower_limit: float | None = None,
) -> list[float]:
    """Equal-width edges over [lo, hi] widened to include the limits, for the store's
    ``histogram(edges=...)`` when only summary statistics (min, max) are at hand."""
    if bins < 1:
        raise ValueError(f"bins must be >= 1, got {bins}")
    low = min(lo, lower_limit) if lower_limit is not None else lo
    high = max(hi, reject_limit) if reject_limit is not None else hi
    if high <= low:
        high = low + (abs(low) * 1e-3 or 1e-3)
    return [float(e) for e in np.linspace(low, high, bins + 1)]


def histogram_from_counts(
    counts: Sequence[tuple[float, float, int]],
    *,
    reject_limit: float | None = None,
    lower_limit: float | None = None,
) -> Histogram:
    """A Histogram from (bin_lo, bin_hi, n) rows as the store returns them; rows with an
    infinite edge hold the readings below / above the range."""
    under = sum(int(n) for lo, _, n in counts if math.isinf(lo))
    over = sum(int(n) for _, hi, n in counts if math.isinf(hi))
    inner = sorted(
        (float(lo), float(hi), int(n))
        for lo, hi, n in counts
        if not math.isinf(lo) and not math.isinf(hi)
    )
    edges = [inner[0][0], *(hi for _, hi, _ in inner)] if inner else []
    return Histogram(
        edges, [n for _, _, n in inner], under, over, "fixed", reject_limit, lower_limit
    )


def guard_band_share(
    values: Sequence[float] | np.ndarray, reject_limit: float, guard_band: float
) -> float | None:
    """Share of readings in (limit − guard_band, limit]: passes that sit close to rejecting."""
    if guard_band <= 0:
        raise ValueError(f"guard band must be > 0, got {guard_band}")
    x = _clean(values)
    if x.size == 0:
        return None
    return float(((x > reject_limit - guard_band) & (x <= reject_limit)).mean())


@dataclass(frozen=True, slots=True)
class IndexEstimate(ResultMixin):
    """A one-sided index with its interval and the normal-model ppm above the limit."""

    name: str
    value: float | None
    lower: float | None
    upper: float | None
    confidence: float
    sigma: float | None
    # normal-model ppm beyond this index's own limit: above the reject limit for Ppu/Cpu,
    # below the lower limit for Ppl
    ppm_beyond_limit: float | None


@dataclass(frozen=True, slots=True)
class NonNormalEstimate(ResultMixin):
    """Percentile-method index from a fitted distribution (or the empirical quantiles)."""

    model: str
    parameters: dict[str, float]
    median: float | None
    p99865: float | None
    ppu: float | None
    ppm_above: float | None
    fit_p_value: float | None


@dataclass(frozen=True, slots=True)
class CapabilityReport(ResultMixin):
    """Capability of leak readings against the reject limit, normal and non-normal."""

    n: int
    mean: float | None
    std: float | None
    reject_limit: float
    lower_limit: float | None
    ppu: IndexEstimate
    cpu: IndexEstimate | None
    ppl: IndexEstimate | None
    observed_ppm_above: float | None
    guard_band: float | None
    guard_band_share: float | None
    shapiro_p: float | None
    anderson_statistic: float | None
    anderson_p: float | None
    normal_supported: bool | None
    non_normal: NonNormalEstimate | None
    recommended: str
    note: str


def _clean(values: Sequence[float] | np.ndarray) -> np.ndarray:
    x = np.asarray(values, dtype=float)
    return x[np.isfinite(x)]


def _index(name: str, value: float, n: int, sigma: float, confidence: float) -> IndexEstimate:
    """``ppm_beyond_limit``: the normal-model share beyond this index's own limit (the tail
    beyond z = 3·index is the same on either side)."""
    lo, hi = bissell_interval(value, n, confidence)
    return IndexEstimate(name, value, lo, hi, confidence, sigma, ppm_above(value))


def _p(value: float | None) -> str:
    return "n/a" if value is None else f"{value:.3g}"


def capability_from_summary(
    n: int,
    mean: float,
    std: float,
    reject_limit: float,
    lower_limit: float | None = None,
    confidence: float = 0.95,
) -> CapabilityReport:
    """Ppu (and Ppl) from the store's summary statistics (n, mean, overall std) only."""
    if n < 2 or not math.isfinite(std) or std <= 0:
        raise ValueError(f"capability needs n >= 2 and a positive std (got n={n}, std={std})")
    ppu = _index("Ppu", (reject_limit - mean) / (3.0 * std), n, std, confidence)
    ppl = None
    if lower_limit is not None:
        ppl = _index("Ppl", (mean - lower_limit) / (3.0 * std), n, std, confidence)
    return CapabilityReport(
        n=n,
        mean=mean,
        std=std,
        reject_limit=reject_limit,
        lower_limit=lower_limit,
        ppu=ppu,
        cpu=None,
        ppl=ppl,
        observed_ppm_above=None,
        guard_band=None,
        guard_band_share=None,
        shapiro_p=None,
        anderson_statistic=None,
        anderson_p=None,
        normal_supported=None,
        non_normal=None,
        recommended="normal",
        note="from summary statistics only: normal model assumed, normality not checked",
    )


_FIT_MAX = 20_000  # readings the candidate models are fitted to at most
_TEST_MAX = 400  # readings the test of fit draws on at most
_MC_SAMPLES = 99  # simulated samples of the test of fit

#: candidate models for skewed leak readings: (name, scipy distribution, fitted parameters,
#: parameters held fixed). Exponential and half-normal start at zero (a leak rate cannot go
#: below none); they are candidates only for readings that do not go below zero.
_CANDIDATES: tuple[tuple[str, Any, int, dict[str, float]], ...] = (
    ("lognormal (3-parameter)", stats.lognorm, 3, {}),
    ("gamma (3-parameter)", stats.gamma, 3, {}),
    ("Weibull (3-parameter)", stats.weibull_min, 3, {}),
    ("exponential", stats.expon, 1, {"loc": 0.0}),
    ("half-normal", stats.halfnorm, 1, {"loc": 0.0}),
    ("normal", stats.norm, 2, {}),
)


def _fit(x: np.ndarray, dist: Any, k: int, fixed: dict[str, float]
         ) -> tuple[float, Any, dict[str, float]] | None:
    """(AIC, frozen distribution, parameters) of one maximum-likelihood fit, or None."""
    if fixed.get("loc") == 0.0 and x.min() < 0:
        return None
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        try:
            params = dist.fit(x, **{f"f{k_}": v for k_, v in fixed.items()})
            frozen = dist(*params)
            loglik = float(np.sum(frozen.logpdf(x)))
        except (ValueError, RuntimeError, FloatingPointError, OverflowError):
            return None
    if not math.isfinite(loglik) or not all(math.isfinite(float(v)) for v in params):
        return None
    names = [*(dist.shapes.split(", ") if dist.shapes else []), "loc", "scale"]
    return 2 * k - 2 * loglik, frozen, dict(zip(names, map(float, params), strict=True))


def _fit_candidates(x: np.ndarray, reject_limit: float, seed: int = 20261203
                    ) -> tuple[NonNormalEstimate | None, dict[str, float]]:
    """The usual models for leak readings fitted by maximum likelihood and ranked by AIC
    (Akaike: 2k − 2 ln L, which charges each estimated parameter); the best one's
    percentile-method Ppu (ISO 22514-2: (USL − X50) / (X99.865 − X50)) and model ppm. Its fit
    is tested with the parameters re-estimated on every simulated sample
    (``scipy.stats.goodness_of_fit``, Anderson–Darling), not as if they were known."""
    if x.size < 8 or np.ptp(x) == 0:
        return None, {}
    rng = np.random.default_rng(seed)
    # a large history fits just as well from a random part of it (bounded work per report);
    # the test of fit uses a smaller part still, as its simulated samples repeat each fit
    sample = rng.choice(x, _FIT_MAX, replace=False) if x.size > _FIT_MAX else x
    test_sample = sample if sample.size <= _TEST_MAX else rng.choice(sample, _TEST_MAX,
                                                                      replace=False)
    fits = {}
    for name, dist, k, fixed in _CANDIDATES:
        got = _fit(sample, dist, k, fixed)
        if got is not None:
            fits[name] = got
    if not fits:
        return None, {}
    aic = {name: f[0] for name, f in fits.items()}
    best = min(aic, key=lambda n: aic[n])
    _, frozen, params = fits[best]
    dist, known = next((d, f) for n, d, _, f in _CANDIDATES if n == best)
    p_fit: float | None
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        try:
            # each simulated sample is drawn from the fitted model, so its refit starts there
            # (half the optimiser's steps); 99 samples resolve p to 0.01, enough to judge it
            # against 0.05 (Davison & Hinkley 1997, ch. 4, from memory: 99 the least)
            guess = {k_: v for k_, v in params.items() if k_ not in known}
            test = stats.goodness_of_fit(dist, test_sample, known_params=known,
                                         guessed_params=guess, statistic="ad",
                                         n_mc_samples=_MC_SAMPLES, rng=rng)
            p_fit = float(test.pvalue)
        except (ValueError, RuntimeError, FloatingPointError, OverflowError):
            p_fit = None
    median = float(frozen.ppf(0.5))
    p_hi = float(frozen.ppf(_P_UPPER))
    ppu = (reject_limit - median) / (p_hi - median) if p_hi > median else None
    return NonNormalEstimate(
        model=best,
        parameters=params,
        median=median,
        p99865=p_hi,
        ppu=ppu,
        ppm_above=1e6 * float(frozen.sf(reject_limit)),
        fit_p_value=p_fit,
    ), aic


def _empirical(x: np.ndarray, reject_limit: float) -> NonNormalEstimate:
    median = float(np.median(x))
    p_hi = float(np.quantile(x, _P_UPPER))
    ppu = (reject_limit - median) / (p_hi - median) if p_hi > median else None
    return NonNormalEstimate(
        model="empirical percentiles",
        parameters={},
        median=median,
        p99865=p_hi,
        ppu=ppu,
        ppm_above=1e6 * float((x > reject_limit).mean()),
        fit_p_value=None,
    )


def capability(
    values: Sequence[float] | np.ndarray,
    reject_limit: float,
    lower_limit: float | None = None,
    *,
    guard_band: float | None = None,
    confidence: float = 0.95,
    alpha: float = 0.05,
    groups: Sequence[object] | np.ndarray | None = None,
) -> CapabilityReport:
    """Full capability study of leak readings (in production order, for the within sigma).

    ``guard_band`` (same unit as the readings) defaults to 10 % of the tolerance (reject limit
    minus lower limit, or the reject limit itself when there is no lower limit). ``groups``
    (one label per reading, e.g. the station) keeps the moving ranges of Cpu within each
    station's own sequence: readings of several stations interleaved in time would otherwise
    put the stations' differences into the "within" σ.
    """
    if groups is not None:
        labels = np.asarray(groups, dtype=object)
        raw = np.asarray(values, dtype=float)
        if labels.shape != raw.shape:
            raise ValueError("groups needs one label per reading")
        keep = np.isfinite(raw)
        ranges = [np.abs(np.diff(raw[keep][labels[keep] == g]))
                  for g in dict.fromkeys(labels[keep].tolist())]
        within = np.concatenate([r for r in ranges if r.size]) if any(
            r.size for r in ranges) else np.array([])
    else:
        within = None
    x = _clean(values)
    n = int(x.size)
    if n < 2:
        raise ValueError(f"capability needs at least 2 readings, got {n}")
    mean = float(x.mean())
    std = float(x.std(ddof=1))
    if std <= 0:
        raise ValueError("capability needs readings that vary (standard deviation is 0)")
    tolerance = reject_limit - lower_limit if lower_limit is not None else abs(reject_limit)
    band = guard_band if guard_band is not None else 0.1 * tolerance
    ppu = _index("Ppu", (reject_limit - mean) / (3.0 * std), n, std, confidence)
    cpu = None
    moving = np.abs(np.diff(x)) if within is None else within
    if n >= 3 and moving.size:
        mr_bar = float(moving.mean())
        if mr_bar > 0:
            sigma_within = mr_bar / D2_N2
            cpu = _index(
                "Cpu", (reject_limit - mean) / (3.0 * sigma_within), n, sigma_within, confidence
            )
    ppl = None
    if lower_limit is not None:
        ppl = _index("Ppl", (mean - lower_limit) / (3.0 * std), n, std, confidence)

    shapiro_p = float(stats.shapiro(x).pvalue) if 3 <= n <= 5000 else None
    ad_stat = ad_p = None
    if n >= 8:
        # p-value interpolated from the published tables (0.01..0.15; clipped at the ends)
        ad = stats.anderson(x, dist="norm", method="interpolate")
        ad_stat, ad_p = float(ad.statistic), float(ad.pvalue)
    normal_ok: bool | None
    if shapiro_p is not None:
        normal_ok = shapiro_p > alpha and (ad_p is None or ad_p > alpha)
    elif ad_p is not None:
        normal_ok = ad_p > alpha
    else:
        normal_ok = None

    model, _aic = _fit_candidates(x, reject_limit)
    model_ok = model is not None and model.fit_p_value is not None and model.fit_p_value > alpha
    observed = 1e6 * float((x > reject_limit).mean())
    if normal_ok:
        recommended, non_normal = "normal", model
        note = (
            f"normality not rejected (Shapiro–Wilk p = {_p(shapiro_p)}); "
            "use Ppu/Cpu and the normal ppm"
        )
    elif model_ok and model is not None:
        recommended, non_normal = "fitted", model
        note = (
            f"normality rejected (Shapiro–Wilk p = {_p(shapiro_p)}); of the candidate models "
            f"the {model.model} has the lowest AIC and fits (Anderson–Darling with the "
            f"parameters re-estimated, p = {_p(model.fit_p_value)}): its percentile-method "
            f"Ppu (ISO 22514-2) and model ppm {_p(model.ppm_above)}, beside the observed "
            f"{observed:.3g} ppm"
        )
    else:
        non_normal = _empirical(x, reject_limit)
        recommended = "empirical"
        enough = n >= 1000
        note = (
            "normality rejected and no candidate model fits; percentile method on the "
            "empirical quantiles"
            + (
                ""
                if enough
                else f" (only {n} readings: the 99.865 % quantile is poorly determined below ~1000)"
            )
        )
        if normal_ok is None:
            note = "too few readings to check normality; " + note
    return CapabilityReport(
        n=n,
        mean=mean,
        std=std,
        reject_limit=reject_limit,
        lower_limit=lower_limit,
        ppu=ppu,
        cpu=cpu,
        ppl=ppl,
        observed_ppm_above=1e6 * float((x > reject_limit).mean()),
        guard_band=band,
        guard_band_share=guard_band_share(x, reject_limit, band),
        shapiro_p=shapiro_p,
        anderson_statistic=ad_stat,
        anderson_p=ad_p,
        normal_supported=normal_ok,
        non_normal=non_normal,
        recommended=recommended,
        note=note,
    )
