"""Calibration health: control charts on the master loss and sensitivity, alarms, drift projection.

A station's calibration moves when its fixture, seals or temperature move: the master part's
loss (the zero offset) creeps and the sensitivity (sccm per Pa) changes. Two charts for small,
persistent shifts, both with individual calibrations as points:

- EWMA (NIST/SEMATECH e-Handbook 6.3.2.4): ``z_i = λ·x_i + (1 − λ)·z_{i−1}``, ``z_0`` = target,
  limits ``target ± L·σ·sqrt(λ/(2−λ)·(1 − (1−λ)^{2i}))`` (exact, time-varying) or without the
  last factor (asymptotic).
- Tabular CUSUM (NIST/SEMATECH e-Handbook 6.3.2.3; Montgomery): ``SH_i = max(0, x_i − (μ0 + kσ)
  + SH_{i−1})``, ``SL_i = max(0, (μ0 − kσ) − x_i + SL_{i−1})``, signal when a sum exceeds ``hσ``.

Target and σ come from configuration when known; otherwise from a baseline (the first
calibrations): the mean, and σ from the average moving range / 1.128.

The drift projection fits master loss against time with the Theil–Sen estimator (median of
pairwise slopes, robust to the odd bad calibration; ``scipy.stats.theilslopes``) and reports
when the fitted line reaches the configured limit, or that there is no significant drift.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass, field
from datetime import UTC, datetime, timedelta
from typing import Literal

import numpy as np
import pandas as pd
from scipy import stats

from analytics._result import ResultMixin

__all__ = [
    "Alarm",
    "CalibrationHealth",
    "ChartPoint",
    "ControlChart",
    "DriftProjection",
    "HealthConfig",
    "SeriesHealth",
    "baseline",
    "calibration_health",
    "cusum_chart",
    "ewma_chart",
    "project_drift",
]

DriftStatus = Literal[
    "insufficient data", "no drift", "drifting", "drifting away", "reaches limit", "at limit"
]
_D2 = 1.128  # d2 for moving ranges of two (NIST e-Handbook 6.3.2.2)


@dataclass(frozen=True, slots=True)
class ChartPoint(ResultMixin):
    """One plotted point: the statistic(s) and the limits in force at that point."""

    index: int
    value: float
    statistic: float
    lower: float
    upper: float
    signal: bool
    statistic_low: float | None = None  # CUSUM: SL (statistic is SH)


@dataclass(frozen=True, slots=True)
class ControlChart(ResultMixin):
    """A chart's points and parameters; ``signals`` lists the indices that signalled."""

    kind: Literal["ewma", "cusum"]
    target: float
    sigma: float
    parameters: dict[str, float]
    points: list[ChartPoint]
    signals: list[int]

    @property
    def signalled(self) -> bool:
        return bool(self.signals)


def baseline(values: Sequence[float] | np.ndarray, n: int | None = None) -> tuple[float, float]:
    """(mean, σ) of the first ``n`` values (all when None); σ = MR̄/1.128, or s if MR̄ is 0."""
    x = np.asarray(values, dtype=float)
    if n is not None:
        x = x[:n]
    x = x[np.isfinite(x)]
    if x.size < 2:
        raise ValueError(f"a baseline needs at least 2 values, got {x.size}")
    mr = float(np.abs(np.diff(x)).mean())
    sigma = mr / _D2 if mr > 0 else float(x.std(ddof=1))
    return float(x.mean()), sigma


def _check_sigma(sigma: float) -> None:
    if not math.isfinite(sigma) or sigma <= 0:
        raise ValueError(f"chart sigma must be a positive number, got {sigma}")


def ewma_chart(
    values: Sequence[float] | np.ndarray,
    target: float,
    sigma: float,
    *,
    lam: float = 0.2,
    L: float = 3.0,
    exact: bool = True,
) -> ControlChart:
    """EWMA chart of individual values (NIST e-Handbook 6.3.2.4)."""
    _check_sigma(sigma)
    if not 0 < lam <= 1:
        raise ValueError(f"EWMA lambda must be in (0, 1], got {lam}")
    z = target
    points: list[ChartPoint] = []
    asymptotic = L * sigma * math.sqrt(lam / (2.0 - lam))
    for i, x in enumerate(np.asarray(values, dtype=float), start=1):
        z = lam * float(x) + (1.0 - lam) * z
        half = asymptotic * math.sqrt(1.0 - (1.0 - lam) ** (2 * i)) if exact else asymptotic
        lo, hi = target - half, target + half
        points.append(ChartPoint(i - 1, float(x), z, lo, hi, bool(z > hi or z < lo)))
    return ControlChart(
        kind="ewma",
        target=target,
        sigma=sigma,
        parameters={"lambda": lam, "L": L, "exact": float(exact)},
        points=points,
        signals=[p.index for p in points if p.signal],
    )


def cusum_chart(
    values: Sequence[float] | np.ndarray,
    target: float,
    sigma: float,
    *,
    k: float = 0.5,
    h: float = 5.0,
) -> ControlChart:
    """Two-sided tabular CUSUM; ``k`` (reference value) and ``h`` (decision interval) in σ."""
    _check_sigma(sigma)
    if k < 0 or h <= 0:
        raise ValueError(f"CUSUM needs k >= 0 and h > 0, got k={k}, h={h}")
    K, H = k * sigma, h * sigma
    sh = sl = 0.0
    points: list[ChartPoint] = []
    for i, x in enumerate(np.asarray(values, dtype=float)):
        sh = max(0.0, float(x) - (target + K) + sh)
        sl = max(0.0, (target - K) - float(x) + sl)
        points.append(ChartPoint(i, float(x), sh, 0.0, H, bool(sh > H or sl > H), statistic_low=sl))
    return ControlChart(
        kind="cusum",
        target=target,
        sigma=sigma,
        parameters={"k": k, "h": h},
        points=points,
        signals=[p.index for p in points if p.signal],
    )


@dataclass(frozen=True, slots=True)
class DriftProjection(ResultMixin):
    """Theil–Sen trend of a series vs time and when it reaches ``limit``."""

    status: DriftStatus
    n: int
    slope_per_day: float | None
    slope_low: float | None
    slope_high: float | None
    current_fit: float | None
    limit: float | None
    reaches_limit_at: datetime | None
    days_to_limit: float | None
    note: str


def project_drift(
    times: Sequence[datetime] | pd.Series,
    values: Sequence[float] | np.ndarray,
    limit: float | None,
    *,
    upper: bool = True,
    min_points: int = 5,
    confidence: float = 0.95,
) -> DriftProjection:
    """When will the series reach ``limit`` (a ceiling, or a floor with ``upper=False``)?

    Drift counts as real only when the Theil–Sen slope's confidence interval excludes zero;
    only drift towards the limit projects a date.
    """
    t = pd.to_datetime(pd.Series(list(times)), utc=True)
    y = np.asarray(values, dtype=float)
    ok = np.isfinite(y) & t.notna().to_numpy()
    t, y = t[ok].reset_index(drop=True), y[ok]
    n = int(y.size)
    if n < min_points or t.nunique() < 2:
        return DriftProjection(
            "insufficient data", n, None, None, None, None, limit, None, None,
            f"need at least {min_points} points at distinct times, have {n}",
        )  # fmt: skip
    days = ((t - t.iloc[0]).dt.total_seconds() / 86400.0).to_numpy()
    res = stats.theilslopes(y, days, alpha=confidence)
    slope, lo, hi = float(res.slope), float(res.low_slope), float(res.high_slope)
    current = float(res.intercept + slope * float(days.max()))
    last = t.iloc[-1].to_pydatetime()

    def make(status: DriftStatus, at: datetime | None, days_left: float | None, note: str
             ) -> DriftProjection:  # fmt: skip
        return DriftProjection(status, n, slope, lo, hi, current, limit, at, days_left, note)

    significant = not (lo <= 0.0 <= hi)
    if limit is None:
        return make("drifting" if significant else "no drift", None, None,
                    "no limit configured; slope reported only")  # fmt: skip
    beyond = current >= limit if upper else current <= limit
    if beyond:
        return make("at limit", last, 0.0, f"the fitted level {current:.4g} has reached {limit:g}")
    if not significant:
        return make("no drift", None, None,
                    f"slope not significant ({confidence:.0%} interval {lo:.4g}..{hi:.4g} "
                    "per day includes 0)")  # fmt: skip
    if (slope > 0) != upper:
        return make("drifting away", None, None, "drift is away from the limit")
    days_left = (limit - current) / slope
    at = last + timedelta(days=days_left)
    note = f"at {slope:.4g} per day the fit reaches {limit:g} in {days_left:.1f} days"
    return make("reaches limit", at, days_left, note)


@dataclass(frozen=True, slots=True)
class HealthConfig:
    """Limits and chart settings for calibration health (per plant; same for every station)."""

    min_ratio: float | None = None
    # the span must stand this many σ of the master loss clear of it (None: not checked);
    # unlike the ratio it stays meaningful when the master loss is near or below zero
    min_window: float | None = 10.0
    master_loss_limit_pa: float | None = None
    baseline_points: int = 10
    ewma_lambda: float = 0.2
    ewma_L: float = 3.0
    cusum_k: float = 0.5
    cusum_h: float = 5.0
    min_points: int = 5
    targets: dict[str, tuple[float, float]] = field(default_factory=dict)  # series → (target, σ)


@dataclass(frozen=True, slots=True)
class Alarm(ResultMixin):
    station: str
    program: str
    at: datetime | None
    kind: Literal["ewma", "cusum", "ratio", "window", "failed", "projection"]
    series: str
    message: str


@dataclass(frozen=True, slots=True)
class SeriesHealth(ResultMixin):
    """One station/program's calibration series with its charts and projection."""

    station: str
    program: str
    n: int
    times: list[datetime]
    master_loss_pa: list[float]
    standard_loss_pa: list[float]
    ratio: list[float | None]  # None: undefined (master loss <= 0) or not sent
    sensitivity: list[float | None]
    passed: list[bool | None]  # None: the station did not judge the calibration
    charts: dict[str, dict[str, ControlChart]]  # series → {"ewma": …, "cusum": …}
    projection: DriftProjection
    alarms: list[Alarm]
    note: str


@dataclass(frozen=True, slots=True)
class CalibrationHealth(ResultMixin):
    series: list[SeriesHealth]
    alarms: list[Alarm]


_CHARTED = ("master_loss_pa", "sensitivity")


def _optional_floats(column: pd.Series) -> list[float | None]:
    return [None if pd.isna(v) else float(v) for v in column]


def _series_health(station: str, program: str, g: pd.DataFrame, cfg: HealthConfig) -> SeriesHealth:
    g = g.sort_values("ended_at", kind="mergesort")
    times = [ts.to_pydatetime() for ts in pd.to_datetime(g["ended_at"], utc=True)]
    passed = [None if pd.isna(p) else bool(p) for p in g["passed"]]
    alarms: list[Alarm] = []
    charts: dict[str, dict[str, ControlChart]] = {}
    notes: list[str] = []
    # Charts track the calibrations the station did not fail (a station that does not judge
    # its calibrations leaves passed absent); failed runs raise their own alarm.
    good = g[g["passed"].astype("boolean").fillna(True).astype(bool)]
    for name in _CHARTED:
        column = pd.to_numeric(good[name], errors="coerce").to_numpy(dtype=float)
        kept = ~np.isnan(column)  # an absent value (no sensitivity without a span) is no point
        values = column[kept]
        if name in cfg.targets:
            target, sigma = cfg.targets[name]
            source = "configured"
        else:
            if values.size < max(cfg.min_points, 2):
                notes.append(f"{name}: {values.size} passed calibrations, too few for charts")
                continue
            try:
                target, sigma = baseline(values, cfg.baseline_points)
            except ValueError:
                continue
            source = f"baseline of first {min(cfg.baseline_points, values.size)}"
            if sigma <= 0:
                notes.append(f"{name}: baseline does not vary, no charts")
                continue
        notes.append(f"{name}: target {target:.4g}, sigma {sigma:.3g} ({source})")
        good_times = [
            ts.to_pydatetime()
            for ts, k in zip(pd.to_datetime(good["ended_at"], utc=True), kept, strict=True)
            if k
        ]
        ewma = ewma_chart(values, target, sigma, lam=cfg.ewma_lambda, L=cfg.ewma_L)
        cusum = cusum_chart(values, target, sigma, k=cfg.cusum_k, h=cfg.cusum_h)
        charts[name] = {"ewma": ewma, "cusum": cusum}
        for chart in (ewma, cusum):
            if chart.signals:
                first = chart.signals[0]
                alarms.append(
                    Alarm(
                        station,
                        program,
                        good_times[first],
                        chart.kind,
                        name,
                        f"{chart.kind.upper()} on {name} signalled at calibration "
                        f"{first + 1} of {values.size} ({len(chart.signals)} point(s))",
                    )
                )
    reasons = g["reason"].fillna("").astype(str).tolist() if "reason" in g else [""] * len(g)
    ratios = pd.to_numeric(g["ratio"], errors="coerce").to_numpy(dtype=float)
    masters = g["master_loss_pa"].to_numpy(dtype=float)
    spans = g["standard_loss_pa"].to_numpy(dtype=float) - masters
    # σ of the master loss from its moving ranges (MR̄/1.128, NIST/SEMATECH e-Handbook
    # 6.3.2.2), the scatter a good part's loss has between calibrations
    noise = float(np.mean(np.abs(np.diff(masters)))) / 1.128 if len(masters) >= 3 else 0.0
    for ts, ok, reason, ratio, span in zip(times, passed, reasons, ratios, spans, strict=True):
        if cfg.min_window is not None and noise > 0 and span / noise < cfg.min_window:
            alarms.append(Alarm(station, program, ts, "window", "standard_loss_pa",
                                f"span {span:.3g} Pa is {span / noise:.1f} σ of the master loss "
                                f"(σ {noise:.3g} Pa), under {cfg.min_window:g}"))
        if ok is False:
            why = f": {reason}" if reason else ""
            alarms.append(
                Alarm(station, program, ts, "failed", "passed", f"calibration failed{why}")
            )
        if cfg.min_ratio is not None and not np.isnan(ratio) and ratio < cfg.min_ratio:
            message = f"ratio {ratio:.3g} below minimum {cfg.min_ratio:g}"
            alarms.append(Alarm(station, program, ts, "ratio", "ratio", message))
    projection = project_drift(
        good["ended_at"],
        good["master_loss_pa"].to_numpy(dtype=float),
        cfg.master_loss_limit_pa,
        min_points=cfg.min_points,
    )
    if projection.status in ("reaches limit", "at limit") and projection.reaches_limit_at:
        alarms.append(
            Alarm(
                station,
                program,
                projection.reaches_limit_at,
                "projection",
                "master_loss_pa",
                projection.note,
            )
        )
    return SeriesHealth(
        station=station,
        program=program,
        n=len(g),
        times=times,
        master_loss_pa=[float(v) for v in g["master_loss_pa"]],
        standard_loss_pa=[float(v) for v in g["standard_loss_pa"]],
        ratio=_optional_floats(g["ratio"]),
        sensitivity=_optional_floats(g["sensitivity"]),
        passed=passed,
        charts=charts,
        projection=projection,
        alarms=alarms,
        note="; ".join(notes),
    )


def calibration_health(
    calibrations: pd.DataFrame, config: HealthConfig | None = None
) -> CalibrationHealth:
    """Charts, alarms and drift projection per (station, program) from calibration events."""
    cfg = config or HealthConfig()
    needed = [
        "station",
        "program",
        "ended_at",
        "master_loss_pa",
        "standard_loss_pa",
        "ratio",
        "sensitivity",
        "passed",
    ]
    missing = [c for c in needed if c not in calibrations.columns]
    if missing:
        raise ValueError(f"calibrations are missing column(s) {', '.join(missing)}")
    out: list[SeriesHealth] = []
    for (station, program), g in calibrations.groupby(["station", "program"], sort=True):
        out.append(_series_health(str(station), str(program), g, cfg))
    epoch = datetime(1970, 1, 1, tzinfo=UTC)
    alarms = sorted((a for s in out for a in s.alarms), key=lambda a: a.at or epoch)
    return CalibrationHealth(series=out, alarms=alarms)
