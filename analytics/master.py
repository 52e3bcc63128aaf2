"""Master-part qualification: choose the known-good part a station calibrates against.

The master part should be as tight as production parts get (it defines zero leak, so it should
read lowest — most negative against the current calibration) and should repeat tightly (its
scatter becomes every calibration's scatter). Candidates are each tested several times.

Rule (stated in the result):
- repeatability: a candidate is excluded when its variance is significantly larger than the
  pooled variance of the other candidates (one-sided F test at ``alpha``; the pooled
  within-part variance is the one-way ANOVA error mean square), not by comparing sample
  standard deviations of a few readings with each other;
- ranking: for each eligible candidate the probability that its true mean is the lowest,
  from the sampling distributions of the means (normal, pooled σ, seeded draws); the pick is
  the most probable, with that probability as its confidence;
- the repeats needed: how many readings per candidate would tell the pick from the runner-up
  (two-sided 5 %, power 80 %, normal approximation: n = 2·(z₀.₉₇₅ + z₀.₈)²·σ²/Δ²).
The evidence table shows every candidate's numbers and why it was or was not chosen, plus a
Welch t-test of the pick against the runner-up.
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
    confidence: float | None = None  # probability that the pick's true mean is the lowest
    repeats_needed: int | None = None  # per candidate, to tell the pick from the runner-up


def qualify_master(
    df: pd.DataFrame,
    *,
    part: str = "part",
    value: str = "value",
    min_tests: int = 3,
    alpha: float = 0.05,
    draws: int = 20_000,
    seed: int = 20261203,
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
    tested = table[(table["n"] >= min_tests) & table["std"].notna()]
    ss = ((tested["n"] - 1) * tested["std"] ** 2)
    dof = tested["n"] - 1
    reasons: dict[str, str] = {}
    eligible: list[str] = []
    for name, row in table.iterrows():
        if name not in tested.index:
            reasons[str(name)] = f"only {int(row['n'])} reading(s); {min_tests} needed"
            continue
        others_dof = float(dof.drop(name).sum())
        if others_dof <= 0:
            eligible.append(str(name))
            continue
        pooled_others = float(ss.drop(name).sum()) / others_dof
        f = float(row["std"]) ** 2 / pooled_others if pooled_others > 0 else math.inf
        p_loose = float(stats.f.sf(f, int(row["n"]) - 1, others_dof))
        if p_loose < alpha:
            reasons[str(name)] = (f"repeats loosely: variance {f:.2g}× the others' pooled "
                                  f"(F test p = {p_loose:.2g} < {alpha:g})")
        else:
            eligible.append(str(name))
    pooled = float(ss.sum() / dof.sum()) if dof.sum() > 0 else math.nan
    mean_of = {str(k): float(v) for k, v in table["mean"].items()}
    n_of = {str(k): int(v) for k, v in table["n"].items()}
    chance: dict[str, float] = {}
    if eligible and math.isfinite(pooled) and pooled > 0:
        rng = np.random.default_rng(seed)
        means = np.array([mean_of[e] for e in eligible])
        ses = np.array([math.sqrt(pooled / n_of[e]) for e in eligible])
        sampled = rng.normal(means, ses, size=(draws, len(eligible)))
        lowest = np.bincount(sampled.argmin(axis=1), minlength=len(eligible)) / draws
        chance = {e: float(p) for e, p in zip(eligible, lowest, strict=True)}
    elif eligible:
        chance = {e: 1.0 if i == 0 else 0.0 for i, e in enumerate(eligible)}
    ranked = sorted(eligible, key=lambda e: (-chance.get(e, 0.0), mean_of[e]))
    chosen = ranked[0] if ranked else None
    runner = ranked[1] if len(ranked) > 1 else None
    candidates = []
    for name, row in table.iterrows():
        key = str(name)
        std = None if pd.isna(row["std"]) else float(row["std"])
        if key == chosen:
            reason = (f"chosen: lowest mean with {chance.get(key, 1.0):.0%} probability among "
                      "candidates that repeat as tightly as the rest")
        elif key in eligible:
            reason = f"eligible: lowest with {chance.get(key, 0.0):.0%} probability"
        else:
            reason = reasons.get(key, "")
        candidates.append(Candidate(
            part=key, n=int(row["n"]), mean=float(row["mean"]), std=std,
            min=float(row["min"]), max=float(row["max"]), rank_mean=int(row["rank_mean"]),
            rank_std=None if pd.isna(row["rank_std"]) else int(row["rank_std"]),
            eligible=key in eligible, reason=reason))
    welch_p = None
    note = ""
    repeats_needed = None
    if chosen is not None and runner is not None:
        a = data.loc[data["part"] == chosen, "value"].to_numpy()
        b = data.loc[data["part"] == runner, "value"].to_numpy()
        welch_p = float(stats.ttest_ind(a, b, equal_var=False).pvalue)
        gap = abs(mean_of[runner] - mean_of[chosen])
        if gap > 0 and math.isfinite(pooled):
            z = float(stats.norm.ppf(0.975) + stats.norm.ppf(0.8))
            repeats_needed = max(2, math.ceil(2 * z**2 * pooled / gap**2))
        if chance.get(chosen, 1.0) < 0.95:
            note = (f"{chosen} is lowest with {chance[chosen]:.0%} probability only (runner-up "
                    f"{runner}, Welch p = {welch_p:.3g}); "
                    + (f"about {repeats_needed} readings per candidate would settle it"
                       if repeats_needed else "test more"))
    elif chosen is None:
        note = "no candidate qualifies; test each candidate more often"
    rule = (f"candidates with ≥ {min_tests} readings whose variance is not significantly above "
            f"the others' pooled variance (F test, {alpha:g}); the pick has the highest "
            "probability of the lowest true mean")
    return MasterSelection(chosen, candidates, runner, welch_p, rule, note,
                           chance.get(chosen) if chosen else None, repeats_needed)
