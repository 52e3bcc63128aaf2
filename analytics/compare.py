"""Yield comparisons for managers: days, ISO weeks and shifts, weighted by volume, against a
target.

Every function works on *counts*, never on ratios: a period's yield is ``good / total`` of
that period, and a figure over several periods is the pooled ratio ``Σgood / Σtotal``. That
is the volume-weighted mean of the periods' yields (weights = each period's total), so a
Sunday with 1 % of the week's parts moves the week's figure by about 1 %, not by a seventh.
The unweighted mean of period yields is reported beside it only to show the difference.

``good`` and ``total`` come from the store's counts (``good_total``): first-pass yield counts
parts (good = first test passed), test yield counts tests with a verdict (good = passed).

Part families: a result may carry ``part_family`` (sent by the station or set per program in
the gateway config). ``families`` maps each program to its family, or to the program's own
name when its results carry none, so a plant without families filters by program.

Pure: frames in, frames out; no store, no clock.
"""

from __future__ import annotations

import math
from collections.abc import Iterable, Mapping, Sequence
from dataclasses import dataclass
from typing import Literal

import numpy as np
import pandas as pd

from analytics._result import ResultMixin
from analytics.shifts import ShiftCalendar, counts_to_shifts

__all__ = [
    "MEASURES",
    "PeriodSummary",
    "against_target",
    "by_period",
    "families",
    "family_programs",
    "good_total",
    "shift_against_shift",
    "summarise",
    "week_over_week",
    "weighted_yield",
    "yield_axis",
]

Measure = Literal["first_pass", "test"]
Period = Literal["day", "week", "shift"]
MEASURES: dict[str, str] = {"first_pass": "first-pass yield (parts)",
                            "test": "test yield (tests with a verdict)"}


def good_total(counts: pd.DataFrame, measure: Measure, keys: Sequence[str] = ("bucket",)
               ) -> pd.DataFrame:
    """The store's counts → ``*keys, good, total``.

    ``measure="test"`` takes ``verdict_counts`` (``verdict``, ``n``): good = passed tests,
    total = tests with a verdict (aborted tests are left out, as every yield here does).
    ``measure="first_pass"`` takes ``first_pass_counts`` (``parts``, ``first_pass``).
    """
    keys = list(keys)
    cols = [*keys, "good", "total"]
    if counts.empty:
        return pd.DataFrame(columns=cols)
    if measure == "test":
        missing = [c for c in (*keys, "verdict", "n") if c not in counts.columns]
        if missing:
            raise ValueError(f"verdict counts are missing column(s) {', '.join(missing)}")
        verdict = counts["verdict"].astype(str).str.lower()
        frame = counts.assign(good=np.where(verdict == "pass", counts["n"], 0),
                              total=np.where(verdict == "aborted", 0, counts["n"]))
    elif measure == "first_pass":
        missing = [c for c in (*keys, "parts", "first_pass") if c not in counts.columns]
        if missing:
            raise ValueError(f"first-pass counts are missing column(s) {', '.join(missing)}")
        frame = counts.assign(good=counts["first_pass"], total=counts["parts"])
    else:
        raise ValueError(f"unknown yield measure {measure!r}; choose from {', '.join(MEASURES)}")
    if not keys:
        return pd.DataFrame([{"good": int(frame["good"].sum()),
                              "total": int(frame["total"].sum())}])
    out = frame.groupby(keys, dropna=False, as_index=False)[["good", "total"]].sum()
    out[["good", "total"]] = out[["good", "total"]].astype(int)
    return out[cols]


def families(pairs: pd.DataFrame) -> dict[str, str]:
    """``program, part_family`` rows (a program's results) → program → family; a program
    whose results carry no family is a family of its own name. A program seen with several
    families takes the most frequent (ties: alphabetical)."""
    out: dict[str, str] = {}
    if pairs.empty:
        return out
    fam = pairs.get("part_family", pd.Series(pd.NA, index=pairs.index))
    frame = pd.DataFrame({"program": pairs["program"].astype(str),
                          "family": fam.where(fam.notna() & (fam.astype(str).str.strip() != ""))})
    for program, group in frame.groupby("program"):
        named = group["family"].dropna().astype(str).str.strip()
        if named.empty:
            out[str(program)] = str(program)
        else:
            counts = named.value_counts()
            top = counts[counts == counts.max()].index
            out[str(program)] = str(sorted(top)[0])
    return out


def _with_yield(frame: pd.DataFrame) -> pd.DataFrame:
    total = frame["total"].astype(float)
    out = frame.assign(yield_=(frame["good"] / total.where(total > 0)))
    grand = float(total.sum())
    out["share"] = total / grand if grand else np.nan
    return out.rename(columns={"yield_": "yield"})


def by_period(counts: pd.DataFrame, calendar: ShiftCalendar, period: Period,
              time_col: str = "bucket") -> pd.DataFrame:
    """Hourly ``bucket, good, total`` (UTC) → one row per plant-local period, in time order.

    Columns: ``period`` (the label: ``2026-12-01``, ``2026-W49``, ``2026-12-01 early``),
    ``day`` (the local date, for days and shifts; the week's Monday for weeks), ``shift``
    (shifts only), ``good``, ``total``, ``yield`` (None-like NaN when total is 0) and ``share``
    (of all the volume shown). Buckets outside every shift are left out of the shift view.
    """
    need = [time_col, "good", "total"]
    if any(c not in counts.columns for c in need):
        raise ValueError(f"counts need columns {', '.join(need)}")
    cols = ["period", "day", *(["shift"] if period == "shift" else []), "good", "total"]
    if counts.empty:
        return _with_yield(pd.DataFrame(columns=cols).astype({"good": int, "total": int}))
    if period == "shift":
        folded, _exact = counts_to_shifts(counts[need], calendar, time_col=time_col,
                                          count_cols=["good", "total"])
        folded = folded.groupby(["shift_date", "shift"], as_index=False)[["good", "total"]].sum()
        order = {name: i for i, name in enumerate(calendar.names)}
        folded = folded.assign(_o=folded["shift"].map(order)).sort_values(["shift_date", "_o"])
        out = pd.DataFrame({
            "period": folded["shift_date"].astype(str) + " " + folded["shift"].astype(str),
            "day": folded["shift_date"].astype(str), "shift": folded["shift"].astype(str),
            "good": folded["good"].astype(int), "total": folded["total"].astype(int)})
        return _with_yield(out.reset_index(drop=True))
    local = calendar.local_date(counts[time_col])
    if period == "day":
        label = local.astype(str)
        day = label
    elif period == "week":
        iso = pd.Series([d.isocalendar() for d in local], index=counts.index)
        label = iso.map(lambda c: f"{c[0]}-W{c[1]:02d}")
        day = pd.Series([(d - pd.Timedelta(days=d.weekday())) for d in local],
                        index=counts.index).astype(str)
    else:
        raise ValueError(f"unknown period {period!r}; choose day, week or shift")
    frame = pd.DataFrame({"period": label, "day": day, "good": counts["good"],
                          "total": counts["total"]})
    out = frame.groupby(["period", "day"], as_index=False)[["good", "total"]].sum()
    out = out.sort_values("day").reset_index(drop=True)
    out[["good", "total"]] = out[["good", "total"]].astype(int)
    return _with_yield(out)


def weighted_yield(yields: Iterable[float], weights: Iterable[float]) -> float | None:
    """Σ(w·y) / Σw over the pairs with a yield and a positive weight; None when none."""
    pairs = [(float(y), float(w)) for y, w in zip(yields, weights, strict=True)
             if y is not None and not pd.isna(y) and w is not None and float(w) > 0]
    if not pairs:
        return None
    total = math.fsum(w for _, w in pairs)
    return math.fsum(y * w for y, w in pairs) / total


@dataclass(frozen=True, slots=True)
class PeriodSummary(ResultMixin):
    """Several periods at once: the pooled (volume-weighted) yield and what it differs from."""

    periods: int
    good: int
    total: int
    weighted_yield: float | None  # Σgood / Σtotal = the total-weighted mean of the yields
    unweighted_yield: float | None  # plain mean of the periods' yields (each period one point)
    thin_periods: int  # periods holding under a quarter of an equal share of the volume


def summarise(periods: pd.DataFrame) -> PeriodSummary:
    """Pooled figures over ``by_period``'s rows (see ``PeriodSummary``)."""
    with_volume = periods[periods["total"] > 0]
    n = len(with_volume)
    good, total = int(periods["good"].sum()), int(periods["total"].sum())
    fair = 1.0 / n if n else 0.0
    return PeriodSummary(
        periods=n, good=good, total=total,
        weighted_yield=good / total if total else None,
        unweighted_yield=float(with_volume["yield"].mean()) if n else None,
        thin_periods=int((with_volume["total"] / total < fair / 4).sum()) if total else 0,
    )  # fmt: skip


def week_over_week(weeks: pd.DataFrame) -> pd.DataFrame:
    """``by_period(..., "week")`` with ``change_pp``: yield minus the previous week's, in
    percentage points (NaN for the first week or a week without volume)."""
    out = weeks.copy()
    out["change_pp"] = (out["yield"] - out["yield"].shift(1)) * 100.0
    return out


def shift_against_shift(shifts: pd.DataFrame, calendar: ShiftCalendar) -> pd.DataFrame:
    """``by_period(..., "shift")`` → one row per shift name: ``shift``, ``shifts`` (how many
    ran with volume), ``good``, ``total``, ``yield`` (pooled), ``mean_of_shifts`` (unweighted),
    ``lowest``, ``highest`` and ``vs_all_pp`` (pooled yield minus every shift's pooled, pp)."""
    cols = ["shift", "shifts", "good", "total", "yield", "mean_of_shifts", "lowest", "highest",
            "vs_all_pp"]
    ran = shifts[shifts["total"] > 0]
    if ran.empty:
        return pd.DataFrame(columns=cols)
    overall = ran["good"].sum() / ran["total"].sum()
    rows = []
    for name in calendar.names:
        g = ran[ran["shift"] == name]
        if g.empty:
            continue
        pooled = g["good"].sum() / g["total"].sum()
        rows.append({"shift": name, "shifts": len(g), "good": int(g["good"].sum()),
                     "total": int(g["total"].sum()), "yield": pooled,
                     "mean_of_shifts": float(g["yield"].mean()),
                     "lowest": float(g["yield"].min()), "highest": float(g["yield"].max()),
                     "vs_all_pp": (pooled - overall) * 100.0})
    return pd.DataFrame(rows, columns=cols)


def against_target(periods: pd.DataFrame, target: float) -> pd.DataFrame:
    """Periods with ``gap_pp`` (yield − target, percentage points) and ``below`` (True when a
    period with volume falls short). ``target`` is a fraction in (0, 1]."""
    if not 0.0 < target <= 1.0:
        raise ValueError(f"yield target must be between 0 and 100 %, got {target * 100:g} %")
    out = periods.copy()
    out["gap_pp"] = (out["yield"] - target) * 100.0
    out["below"] = (out["total"] > 0) & (out["yield"] < target)
    return out


def yield_axis(values: Iterable[float], target: float | None = None, *,
               min_span: float = 0.10, step: float = 0.05) -> tuple[float, float]:
    """The y-range of a yield chart: up to 100 %, down to a round floor at least ``min_span``
    below the top, lower when a value or the target is lower. A fixed span keeps 98.5 % and
    99.0 % close together instead of stretching half a point to the full height."""
    shown = [float(v) for v in values if v is not None and not pd.isna(v)]
    if target is not None:
        shown.append(float(target))
    lowest = min([*shown, 1.0 - min_span])
    floor = math.floor(round(lowest / step, 9)) * step
    return max(0.0, round(floor, 6)), 1.0


def family_programs(mapping: Mapping[str, str], family: str) -> list[str]:
    """The programs of one family, sorted."""
    return sorted(p for p, f in mapping.items() if f == family)
