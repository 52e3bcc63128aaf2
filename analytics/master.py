"""Master-part qualification: choose the known-good part a station calibrates against.

The master part should be as tight as production parts get (it defines zero leak, so it should
read lowest — most negative against the current calibration) and should repeat tightly (its
scatter becomes every calibration's scatter). Candidates are each tested several times.

Rule (common practice, stated in the result): rank by mean reading, lowest first; a candidate
is eligible when its standard deviation is at most ``std_factor`` × the smallest candidate
standard deviation and it has at least ``min_tests`` readings; pick the lowest-reading eligible
candidate. The evidence table shows every candidate's numbers, its ranks and why it was or was
not chosen, plus a Welch t-test of the pick against the runner-up.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
import pandas as pd
from scipy import stats

from analytics._result import ResultMixin

__all__ = ["Candidate", "MasterSelection", "qualify_master"]


@dataclass(frozen=True, slots=True)
class Candidate(ResultMixin):
    part: str
    n: int
    mean: float
    std: float | None
    min: float
    max: float
    rank_mean: int
    rank_std: int | None
    eligible: bool
    reason: str


@dataclass(frozen=True, slots=True)
class MasterSelection(ResultMixin):
    chosen: str | None
    candidates: list[Candidate]
    runner_up: str | None
    welch_p: float | None
    rule: str
    note: str


def qualify_master(
    df: pd.DataFrame,
    *,
    part: str = "part",
    value: str = "value",
    std_factor: float = 1.5,
    min_tests: int = 3,
) -> MasterSelection:
    """Rank candidate master parts and pick one (see module docstring for the rule)."""
    for c in (part, value):
        if c not in df.columns:
            raise ValueError(f"master-part data need a {c!r} column; got {', '.join(df.columns)}")
    data = pd.DataFrame({"part": df[part].astype(str), "value": pd.to_numeric(df[value])})
    data = data[np.isfinite(data["value"])]
    if data["part"].nunique() < 1:
        raise ValueError("no candidate readings")
    g = data.groupby("part")["value"]
    table = pd.DataFrame(
        {"n": g.size(), "mean": g.mean(), "std": g.std(ddof=1), "min": g.min(), "max": g.max()}
    )
    table = table.sort_values(["mean", "std"], kind="mergesort", na_position="last")
    table["rank_mean"] = np.arange(1, len(table) + 1)
    table["rank_std"] = table["std"].rank(method="min")
    best_std = (
        float(table.loc[table["n"] >= min_tests, "std"].min())
        if (table["n"] >= min_tests).any()
        else math.nan
    )
    candidates: list[Candidate] = []
    chosen = None
    for name, row in table.iterrows():
        std = None if pd.isna(row["std"]) else float(row["std"])
        if row["n"] < min_tests or std is None:
            eligible, reason = False, f"only {int(row['n'])} reading(s); {min_tests} needed"
        elif math.isfinite(best_std) and std > std_factor * best_std:
            eligible, reason = (
                False,
                (f"repeats loosely: std {std:.3g} > {std_factor:g} × best {best_std:.3g}"),
            )
        else:
            eligible, reason = True, "eligible"
        if eligible and chosen is None:
            chosen, reason = str(name), "chosen: lowest mean among tightly repeating candidates"
        candidates.append(
            Candidate(
                part=str(name),
                n=int(row["n"]),
                mean=float(row["mean"]),
                std=std,
                min=float(row["min"]),
                max=float(row["max"]),
                rank_mean=int(row["rank_mean"]),
                rank_std=None if pd.isna(row["rank_std"]) else int(row["rank_std"]),
                eligible=eligible,
                reason=reason,
            )
        )
    runner = next((c.part for c in candidates if c.eligible and c.part != chosen), None)
    welch_p = None
    note = ""
    if chosen is not None and runner is not None:
        a = data.loc[data["part"] == chosen, "value"].to_numpy()
        b = data.loc[data["part"] == runner, "value"].to_numpy()
        welch_p = float(stats.ttest_ind(a, b, equal_var=False).pvalue)
        if welch_p > 0.05:
            note = (
                f"{chosen} and {runner} do not differ significantly (Welch p = {welch_p:.3g}); "
                "either will do — prefer the tighter one or test more"
            )
    elif chosen is None:
        note = "no candidate qualifies; test each candidate more often"
    rule = (
        f"lowest mean among candidates with ≥ {min_tests} readings and std ≤ {std_factor:g} × "
        "the tightest candidate's std (common practice)"
    )
    return MasterSelection(chosen, candidates, runner, welch_p, rule, note)
