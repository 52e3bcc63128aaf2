"""Gauge studies: type 1 (Cg, Cgk) and crossed gauge R&R by ANOVA and by average and range.

Type 1 (VDA 5 / common automotive practice; formulas as in Minitab's "Methods and formulas for
Type 1 Gage Study"): one reference part measured n times,
``Cg = (K/100·T) / (L·s)``, ``Cgk = (K/200·T − |x̄ − x_ref|) / (L/2·s)`` with K = 20 % and
L = 6 by default; capable when both are ≥ 1.33.

Crossed gauge R&R (AIAG MSA 4th ed., chapter III): every operator measures every part the same
number of times. The ANOVA method fits the two-way model with interaction; when the interaction's
F test has p > 0.25 it is pooled into repeatability (AIAG). Variance components from expected
mean squares, negative estimates set to zero. The average-and-range method uses the AIAG
constants K1 (trials), K2 (appraisers), K3 (parts). Results are standard deviations (1σ) as in
the 4th edition; %GRR against the tolerance uses 6σ.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass
from typing import Literal

import numpy as np
import pandas as pd
from scipy import stats

from analytics._result import ResultMixin

__all__ = [
    "K1_TRIALS",
    "K2_APPRAISERS",
    "K3_PARTS",
    "AnovaRow",
    "GrrReport",
    "Type1Report",
    "grr_anova",
    "grr_average_range",
    "type1_study",
]

# AIAG MSA 4th ed., Average and Range method (chapter III, section B), constants.
# K1 = 1/d2* for the number of trials (many ranges); K2 and K3 = 1/d2* for one range of
# m appraisers / parts. Trials beyond 3 use 1/d2 (common practice; AIAG tabulates 2 and 3).
K1_TRIALS: dict[int, float] = {2: 0.8862, 3: 0.5908, 4: 0.4857, 5: 0.4299}
K3_PARTS: dict[int, float] = {
    2: 0.7071,
    3: 0.5231,
    4: 0.4467,
    5: 0.4030,
    6: 0.3742,
    7: 0.3534,
    8: 0.3375,
    9: 0.3249,
    10: 0.3146,
}
K2_APPRAISERS: dict[int, float] = {m: K3_PARTS[m] for m in (2, 3, 4, 5)}

# D4 for ranges of 2..5 trials (AIAG MSA 4th ed. / ASTM control chart constants): ranges above
# D4·R̄ point at a measurement that should be repeated.
_D4 = {2: 3.267, 3: 2.574, 4: 2.282, 5: 2.114}

_VERDICT_LIMITS = (10.0, 30.0)  # AIAG MSA 4th ed.: <10 % acceptable, 10–30 % conditional


@dataclass(frozen=True, slots=True)
class Type1Report(ResultMixin):
    n: int
    mean: float
    std: float
    reference: float
    tolerance: float
    bias: float
    bias_t: float | None
    bias_p: float | None
    cg: float
    cgk: float
    k_percent: float
    spread_sigmas: float
    capable: bool
    resolution_pct: float | None
    note: str


def type1_study(
    values: Sequence[float] | np.ndarray,
    reference: float,
    tolerance: float,
    *,
    k_percent: float = 20.0,
    spread_sigmas: float = 6.0,
    resolution: float | None = None,
    minimum: float = 1.33,
) -> Type1Report:
    """Type 1 gauge study of repeated readings of one reference part."""
    x = np.asarray(values, dtype=float)
    x = x[np.isfinite(x)]
    n = int(x.size)
    if n < 2:
        raise ValueError(f"a type 1 study needs at least 2 readings, got {n}")
    if not math.isfinite(tolerance) or tolerance <= 0:
        raise ValueError(f"tolerance must be > 0, got {tolerance}")
    mean, std = float(x.mean()), float(x.std(ddof=1))
    if std <= 0:
        raise ValueError(
            "readings do not vary: the gauge resolution is too coarse for a type 1 study"
        )
    bias = mean - reference
    cg = (k_percent / 100.0 * tolerance) / (spread_sigmas * std)
    cgk = (k_percent / 200.0 * tolerance - abs(bias)) / (spread_sigmas / 2.0 * std)
    t = bias / (std / math.sqrt(n))
    p = float(2.0 * stats.t.sf(abs(t), n - 1))
    notes = []
    if n < 25:
        notes.append(f"only {n} readings; 25 or more (50 preferred) is common practice")
    res_pct = None
    if resolution is not None:
        res_pct = 100.0 * resolution / tolerance
        if res_pct > 5.0:
            notes.append(f"resolution is {res_pct:.1f} % of the tolerance (> 5 %)")
    capable = cg >= minimum and cgk >= minimum
    notes.insert(
        0, ("capable" if capable else "not capable") + f" (Cg and Cgk ≥ {minimum:g} needed)"
    )
    return Type1Report(
        n,
        mean,
        std,
        reference,
        tolerance,
        bias,
        t,
        p,
        cg,
        cgk,
        k_percent,
        spread_sigmas,
        capable,
        res_pct,
        "; ".join(notes),
    )


@dataclass(frozen=True, slots=True)
class AnovaRow(ResultMixin):
    source: str
    df: int
    ss: float
    ms: float
    f: float | None
    p: float | None


@dataclass(frozen=True, slots=True)
class GrrReport(ResultMixin):
    """Gauge R&R: σ of each component, %GRR against total variation and tolerance, ndc."""

    method: Literal["anova", "average-range"]
    parts: int
    operators: int
    trials: int
    ev: float  # repeatability σ
    av: float  # reproducibility σ: sqrt(operator² + interaction²), as pct_av
    interaction: float  # part×operator σ (0 when pooled or average-range)
    grr: float
    pv: float
    tv: float
    pct_ev: float
    pct_av: float
    pct_grr: float
    pct_pv: float
    pct_grr_tolerance: float | None
    tolerance: float | None
    ndc: int
    verdict: str
    anova: list[AnovaRow]
    interaction_p: float | None
    interaction_pooled: bool | None
    variance_components: dict[str, float]
    range_flags: list[str]
    note: str
    resolution: float | None = None  # apparent resolution of the readings (rule of tens)
    operator: float = 0.0  # operator σ alone (av is operators and interaction together)
    tolerance_convention: str = ""  # how %GRR of tolerance was taken (one- or two-sided)


def _layout(
    df: pd.DataFrame, part: str, operator: str, value: str
) -> tuple[np.ndarray, list[str], list[str]]:
    """Cube [operator, part, trial] of a balanced crossed study, trial = order of appearance."""
    for c in (part, operator, value):
        if c not in df.columns:
            raise ValueError(f"gauge study data need a {c!r} column; got {', '.join(df.columns)}")
    data = df[[part, operator, value]].copy()
    data[value] = pd.to_numeric(data[value], errors="raise")
    if data[value].isna().any():
        raise ValueError("gauge study data contain empty values")
    parts = sorted(data[part].astype(str).unique(), key=_natural)
    ops = sorted(data[operator].astype(str).unique(), key=_natural)
    if len(parts) < 2 or len(ops) < 2:
        raise ValueError(
            f"a crossed study needs ≥ 2 parts and ≥ 2 operators (got {len(parts)}, {len(ops)})"
        )
    data = data.assign(_op=data[operator].astype(str), _part=data[part].astype(str))
    counts = pd.crosstab(data["_op"], data["_part"]).reindex(index=ops, columns=parts, fill_value=0)
    if counts.to_numpy().min() != counts.to_numpy().max():
        expected = int(counts.to_numpy().max())
        short = [
            f"operator {o} / part {p}: {int(counts.loc[o, p])}"
            for o in ops
            for p in parts
            if counts.loc[o, p] != expected
        ]
        raise ValueError(
            "the study must be balanced (every operator measures every part equally often, "
            f"here {expected} times); short: " + ", ".join(short[:5])
        )
    groups = data.groupby(["_op", "_part"])[value]
    sizes = groups.size()
    r = int(sizes.iloc[0])
    if r < 2:
        raise ValueError("each operator must measure each part at least twice")
    cube = np.empty((len(ops), len(parts), r))
    for (o, p), series in groups:
        cube[ops.index(o), parts.index(p), :] = series.to_numpy(dtype=float)
    return cube, parts, ops


def _natural(text: str) -> tuple[int, float | str]:
    try:
        return (0, float(text))
    except ValueError:
        return (1, text)


def _finish(
    method: Literal["anova", "average-range"],
    cube: np.ndarray,
    ev: float,
    av: float,
    inter: float,
    pv: float,
    tolerance: float | None,
    anova: list[AnovaRow],
    interaction_p: float | None,
    pooled: bool | None,
    note: str,
    one_sided_limit: float | None = None,
) -> GrrReport:
    o, p, r = cube.shape
    operator = av
    av = math.sqrt(operator**2 + inter**2)  # reproducibility: operators and their interaction
    grr = math.sqrt(ev**2 + av**2)
    tv = math.sqrt(grr**2 + pv**2)
    pct = (lambda s: 100.0 * s / tv) if tv > 0 else (lambda s: math.nan)
    convention = ""
    pct_tol: float | None
    if one_sided_limit is not None and not tolerance:
        # one-sided limit: the tolerance is the distance from the process mean to the limit,
        # compared with 3·σ_GRR (AIAG MSA 4th ed., one-sided specifications; from memory)
        half = one_sided_limit - float(cube.mean())
        pct_tol = 100.0 * 3.0 * grr / half if half > 0 else math.inf
        tolerance = 2.0 * half if half > 0 else None
        convention = ("one-sided: %GRR of tolerance = 3·σGRR / (reject limit − mean) "
                      "(AIAG MSA 4th ed.)")
    else:
        pct_tol = 100.0 * 6.0 * grr / tolerance if tolerance else None
        if tolerance:
            convention = "two-sided: %GRR of tolerance = 6·σGRR / tolerance"
    ndc = math.floor(1.41 * pv / grr) if grr > 0 else 0
    worst = max(pct(grr), pct_tol or 0.0)
    verdict = (
        "acceptable"
        if worst < _VERDICT_LIMITS[0]
        else "conditionally acceptable"
        if worst <= _VERDICT_LIMITS[1]
        else "unacceptable"
    )
    if ndc < 5:
        verdict += f"; ndc {ndc} < 5"
    # the rule of tens (AIAG MSA 4th ed., "discrimination"): the readings must resolve at
    # least a tenth of the spread they are judged against; coarser readings hide the
    # repeatability (often EV = 0 from identical repeats) and flatter every figure above
    resolution = data_resolution(cube)
    against = tolerance if tolerance else 6.0 * tv
    resolution_note = ""
    if resolution is not None and against > 0 and resolution > against / 10.0:
        resolution_note = (f"readings resolve {resolution:.4g}, more than a tenth of the "
                           f"{'tolerance' if tolerance else 'study spread (6 TV)'} "
                           f"{against:.4g}: too coarse to judge the gauge")
    if ev == 0.0:
        resolution_note = resolution_note or (
            "repeats never differ: the repeatability is below the readings' resolution"
            + (f" ({resolution:.4g})" if resolution is not None else ""))
    if resolution_note:
        verdict = f"not assessable: {resolution_note} (use finer readings)"
    ranges = cube.max(axis=2) - cube.min(axis=2)
    flags = []
    if r in _D4:
        ucl = _D4[r] * float(ranges.mean())
        for i, j in zip(*np.nonzero(ranges > ucl), strict=True):
            flags.append(
                f"operator #{i + 1}, part #{j + 1}: range {ranges[i, j]:.4g} > UCL {ucl:.4g}"
            )
    return GrrReport(
        method=method,
        parts=p,
        operators=o,
        trials=r,
        ev=ev,
        av=av,
        interaction=inter,
        grr=grr,
        pv=pv,
        tv=tv,
        pct_ev=pct(ev),
        pct_av=pct(av),
        pct_grr=pct(grr),
        pct_pv=pct(pv),
        pct_grr_tolerance=pct_tol,
        tolerance=tolerance,
        ndc=ndc,
        verdict=verdict,
        anova=anova,
        interaction_p=interaction_p,
        interaction_pooled=pooled,
        variance_components={
            "repeatability": ev**2,
            "operator": av**2,
            "part_x_operator": inter**2,
            "part": pv**2,
        },
        range_flags=flags,
        note=note,
        resolution=resolution,
        operator=operator,
        tolerance_convention=convention,
    )


def _f_ratio(num: float, den: float) -> float:
    """An F ratio; with no scatter left to test against (quantised readings) it is infinite
    when the effect is there and undefined (NaN) when it is not."""
    if den > 1e-300:
        return num / den
    return math.inf if num > 1e-300 else math.nan


def _f_p(f: float, df1: int, df2: int) -> float:
    return float(stats.f.sf(f, df1, df2)) if math.isfinite(f) else (0.0 if f > 0 else math.nan)


def data_resolution(values: np.ndarray) -> float | None:
    """The readings' apparent resolution: the smallest step between distinct values (None
    when all readings are equal)."""
    distinct = np.unique(np.round(values.ravel(), 12))
    if len(distinct) < 2:
        return None
    return float(np.diff(distinct).min())


def grr_anova(
    df: pd.DataFrame,
    *,
    part: str = "part",
    operator: str = "operator",
    value: str = "value",
    tolerance: float | None = None,
    pool_alpha: float = 0.25,
    one_sided_limit: float | None = None,
) -> GrrReport:
    """Crossed gauge R&R by two-way ANOVA with interaction (AIAG MSA 4th ed.)."""
    cube, _, _ = _layout(df, part, operator, value)
    o, p, r = cube.shape
    grand = cube.mean()
    op_means = cube.mean(axis=(1, 2))
    part_means = cube.mean(axis=(0, 2))
    cell = cube.mean(axis=2)
    ss_op = p * r * float(((op_means - grand) ** 2).sum())
    ss_part = o * r * float(((part_means - grand) ** 2).sum())
    ss_cells = r * float(((cell - grand) ** 2).sum())
    ss_err = float(((cube - cell[:, :, None]) ** 2).sum())
    # sums of squares that differ from zero only by rounding (repeats that never differ,
    # an interaction that is exactly none) are zero, not a 1e-17 that becomes a huge ndc
    noise = 1e-12 * max(float(((cube - grand) ** 2).sum()), 1e-300)
    ss_int = ss_cells - ss_op - ss_part
    ss_op, ss_part, ss_int, ss_err = (x if abs(x) > noise else 0.0
                                      for x in (ss_op, ss_part, ss_int, ss_err))
    df_op, df_part, df_int, df_err = o - 1, p - 1, (o - 1) * (p - 1), o * p * (r - 1)
    ms_op, ms_part = ss_op / df_op, ss_part / df_part
    ms_int, ms_err = ss_int / df_int, ss_err / df_err
    f_int = ms_int / ms_err if ms_err > 0 else math.inf
    p_int = float(stats.f.sf(f_int, df_int, df_err)) if ms_err > 0 else 0.0
    pooled = p_int > pool_alpha
    # Pooled: interaction joins repeatability and main effects are tested against the pooled
    # mean square; otherwise against the interaction mean square (AIAG MSA 4th ed.).
    df_res, ms_res = df_int + df_err, (ss_int + ss_err) / (df_int + df_err)
    df_den, ms_den = (df_res, ms_res) if pooled else (df_int, ms_int)
    f_op, f_part = _f_ratio(ms_op, ms_den), _f_ratio(ms_part, ms_den)
    table = [
        AnovaRow("part", df_part, ss_part, ms_part, f_part, _f_p(f_part, df_part, df_den)),
        AnovaRow("operator", df_op, ss_op, ms_op, f_op, _f_p(f_op, df_op, df_den)),
    ]
    if pooled:
        table.append(
            AnovaRow("repeatability (pooled)", df_res, ss_int + ss_err, ms_res, None, None)
        )
    else:
        table.append(AnovaRow("part x operator", df_int, ss_int, ms_int, f_int, p_int))
        table.append(AnovaRow("repeatability", df_err, ss_err, ms_err, None, None))
    var_e = ms_res if pooled else ms_err
    var_int = 0.0 if pooled else max(0.0, (ms_int - ms_err) / r)
    var_op = max(0.0, (ms_op - ms_den) / (p * r))
    var_part = max(0.0, (ms_part - ms_den) / (o * r))
    ss_total = float(((cube - grand) ** 2).sum())
    table.append(AnovaRow("total", o * p * r - 1, ss_total, ss_total / (o * p * r - 1), None, None))
    note = f"interaction p = {p_int:.3g} " + (
        f"> {pool_alpha:g}: pooled into repeatability"
        if pooled
        else f"≤ {pool_alpha:g}: kept in the model"
    )
    return _finish(
        "anova",
        cube,
        math.sqrt(var_e),
        math.sqrt(var_op),
        math.sqrt(var_int),
        math.sqrt(var_part),
        tolerance,
        table,
        p_int,
        pooled,
        note,
        one_sided_limit,
    )


def grr_average_range(
    df: pd.DataFrame,
    *,
    part: str = "part",
    operator: str = "operator",
    value: str = "value",
    tolerance: float | None = None,
    one_sided_limit: float | None = None,
) -> GrrReport:
    """Crossed gauge R&R by the AIAG average-and-range method (K1, K2, K3 constants)."""
    cube, _, _ = _layout(df, part, operator, value)
    o, p, r = cube.shape
    if r not in K1_TRIALS:
        raise ValueError(f"average-and-range supports 2–5 trials, got {r}; use the ANOVA method")
    if o not in K2_APPRAISERS:
        raise ValueError(f"average-and-range supports 2–5 operators, got {o}; use the ANOVA method")
    if p not in K3_PARTS:
        raise ValueError(f"average-and-range supports 2–10 parts, got {p}; use the ANOVA method")
    r_bar = float((cube.max(axis=2) - cube.min(axis=2)).mean())  # mean of appraisers' R̄
    ev = r_bar * K1_TRIALS[r]
    op_means = cube.mean(axis=(1, 2))
    x_diff = float(op_means.max() - op_means.min())
    av_sq = (x_diff * K2_APPRAISERS[o]) ** 2 - ev**2 / (p * r)
    av = math.sqrt(av_sq) if av_sq > 0 else 0.0
    part_means = cube.mean(axis=(0, 2))
    rp = float(part_means.max() - part_means.min())
    pv = rp * K3_PARTS[p]
    note = (
        f"R̄ = {r_bar:.4g}, X̄diff = {x_diff:.4g}, Rp = {rp:.4g}; K1 = {K1_TRIALS[r]}, "
        f"K2 = {K2_APPRAISERS[o]}, K3 = {K3_PARTS[p]} (AIAG MSA 4th ed.)"
    )
    return _finish("average-range", cube, ev, av, 0.0, pv, tolerance, [], None, None, note,
                   one_sided_limit)
