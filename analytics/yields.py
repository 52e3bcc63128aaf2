"""Yield: first-pass yield, final yield after retests, retest rate, and reject Paretos.

First-pass yield is a property of parts: a part's first (non-aborted) test decides it. That
needs part ids. Results without a part id cannot be linked to their retests, so each such test
counts as a part of its own (test-level yield) and the result says so in ``basis`` and ``note``.

Grouped yields attribute a part to the group of its *first* test (the station, program, day or
shift where it was first tested); its final outcome is its last test's verdict wherever that
ran. That keeps the numbers additive: the parts of all groups are all parts.

Aborted tests (no verdict on the part) are counted but left out of every yield. ``gross`` is a
reject.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass, field
from typing import Any, Literal

import numpy as np
import pandas as pd

from analytics._result import ResultMixin
from analytics.shifts import ShiftCalendar

__all__ = [
    "GROUPINGS",
    "ParetoReport",
    "ParetoRow",
    "YieldReport",
    "YieldRow",
    "pareto",
    "pareto_from_counts",
    "yield_from_counts",
    "yield_report",
]

GROUPINGS = ("station", "line", "program", "part", "day", "shift")
Basis = Literal["part", "test", "mixed", "none"]

_PASS = "pass"
_ABORTED = "aborted"


@dataclass(frozen=True, slots=True)
class YieldRow(ResultMixin):
    """Yield figures of one group (``group`` maps grouping name → value; empty for overall)."""

    group: dict[str, Any]
    tests: int
    aborted: int
    parts: int
    first_pass: int
    final_pass: int
    retested_parts: int
    retests: int
    passed_tests: int
    first_pass_yield: float | None
    final_yield: float | None
    retest_rate: float | None
    test_yield: float | None
    basis: Basis


@dataclass(frozen=True, slots=True)
class YieldReport(ResultMixin):
    """Overall and grouped yield with a note on how parts were identified."""

    by: tuple[str, ...]
    overall: YieldRow
    rows: list[YieldRow]
    basis: Basis
    note: str
    timezone: str = "UTC"

    def to_frame(self) -> pd.DataFrame:
        records = []
        for row in self.rows:
            d = row.to_dict()
            group = d.pop("group")
            records.append({**group, **d})
        return pd.DataFrame.from_records(records)


def _ratio(num: int, den: int) -> float | None:
    return num / den if den else None


def _basis(with_id: int, without_id: int) -> Basis:
    if with_id and without_id:
        return "mixed"
    if with_id:
        return "part"
    if without_id:
        return "test"
    return "none"


def _require(df: pd.DataFrame, columns: Sequence[str]) -> None:
    missing = [c for c in columns if c not in df.columns]
    if missing:
        raise ValueError(f"results are missing column(s) {', '.join(missing)}")


def _with_groups(df: pd.DataFrame, by: Sequence[str], calendar: ShiftCalendar) -> pd.DataFrame:
    out = df.copy()
    for key in by:
        if key not in GROUPINGS:
            raise ValueError(f"cannot group yield by {key!r}; choose from {', '.join(GROUPINGS)}")
        if key == "day":
            out["day"] = calendar.local_date(out["ended_at"]).astype(str)
        elif key == "shift":
            out["shift"] = calendar.labels(out["ended_at"])
        elif key == "part":
            out["part"] = out["part_id"].where(out["part_id"].notna(), "(no id)")
        else:
            _require(out, [key])
    return out


def _summarise(tests: pd.DataFrame, parts: pd.DataFrame, group: dict[str, Any]) -> YieldRow:
    n_tests = len(tests)
    aborted = int((tests["verdict"] == _ABORTED).sum())
    counted = n_tests - aborted
    passed = int((tests["verdict"] == _PASS).sum())
    n_parts = len(parts)
    first_pass = int(parts["first_pass"].sum())
    final_pass = int(parts["final_pass"].sum())
    retested = int((parts["tests"] > 1).sum())
    retests = int((parts["tests"] - 1).clip(lower=0).sum())
    with_id = int(parts["has_id"].sum())
    return YieldRow(
        group=group,
        tests=n_tests,
        aborted=aborted,
        parts=n_parts,
        first_pass=first_pass,
        final_pass=final_pass,
        retested_parts=retested,
        retests=retests,
        passed_tests=passed,
        first_pass_yield=_ratio(first_pass, n_parts),
        final_yield=_ratio(final_pass, n_parts),
        retest_rate=_ratio(retested, n_parts),
        test_yield=_ratio(passed, counted),
        basis=_basis(with_id, n_parts - with_id),
    )


def _parts_table(counted: pd.DataFrame) -> pd.DataFrame:
    """One row per part (tests without an id are parts of one test), in first-test order."""
    ordered = counted.sort_values(["ended_at", "station", "cycle"], kind="mergesort")
    has_id = ordered["part_id"].notna() & (ordered["part_id"].astype(str).str.strip() != "")
    key = np.where(
        has_id, "id:" + ordered["part_id"].astype(str), "row:" + ordered.index.astype(str)
    )
    ordered = ordered.assign(_part_key=key, _has_id=has_id.to_numpy())
    grouped = ordered.groupby("_part_key", sort=False)
    first = grouped.head(1).set_index("_part_key")
    last = grouped.tail(1).set_index("_part_key")
    parts = pd.DataFrame(
        {
            "has_id": first["_has_id"],
            "tests": grouped.size(),
            "first_pass": first["verdict"] == _PASS,
            "final_pass": last.loc[first.index, "verdict"] == _PASS,
            "first_index": first["_row"],
        }
    )
    return parts


def yield_report(
    results: pd.DataFrame,
    by: Sequence[str] = (),
    calendar: ShiftCalendar | None = None,
) -> YieldReport:
    """First-pass, final and test-level yield and retest rate, overall and per group.

    ``results`` has the canonical result columns (at least station, cycle, ended_at, verdict,
    part_id and the grouping columns). ``by`` takes names from ``GROUPINGS``; "day" and "shift"
    use ``calendar`` (default: UTC and the three default shifts).
    """
    calendar = calendar or ShiftCalendar()
    _require(results, ["station", "ended_at", "verdict"])
    df = results.copy()
    if "part_id" not in df.columns:
        df["part_id"] = None
    if "cycle" not in df.columns:
        df["cycle"] = 0
    df["verdict"] = df["verdict"].astype(str).str.lower()
    df["ended_at"] = pd.to_datetime(df["ended_at"], utc=True)
    df = df.reset_index(drop=True)
    df["_row"] = df.index
    df = _with_groups(df, by, calendar)
    by = tuple(by)

    counted = df[df["verdict"] != _ABORTED]
    parts = _parts_table(counted)
    if by:
        first_rows = df.loc[parts["first_index"].to_numpy(), list(by)]
        parts[list(by)] = first_rows.to_numpy()

    overall = _summarise(df, parts, {})
    rows: list[YieldRow] = []
    if by:
        # positions per group, found once (a mask per group is quadratic on a week of data)
        empty = np.array([], dtype=int)

        def positions(frame: pd.DataFrame) -> dict[tuple[str, ...], np.ndarray]:
            found = frame[list(by)].astype(str).groupby(list(by), sort=False, dropna=False).indices
            return {(k if isinstance(k, tuple) else (k,)): np.asarray(v) for k, v in found.items()}

        test_at, part_at = positions(df), positions(parts)
        for key in sorted(test_at):
            rows.append(
                _summarise(
                    df.iloc[test_at.get(key, empty)],
                    parts.iloc[part_at.get(key, empty)],
                    dict(zip(by, key, strict=True)),
                )
            )
    basis = overall.basis
    note = _note(basis, int((~parts["has_id"]).sum()))
    return YieldReport(
        by=by, overall=overall, rows=rows, basis=basis, note=note, timezone=calendar.timezone
    )


def _note(basis: Basis, without_id: int) -> str:
    if basis == "part":
        return "first-pass yield per part: each part's first test decides (part ids present)"
    if basis == "test":
        return (
            "no part ids: first-pass and final yield fall back to test-level yield "
            "(every test counted as its own part; retests cannot be recognised)"
        )
    if basis == "mixed":
        return (
            f"{without_id} test(s) without a part id counted as single-test parts; "
            "their retests cannot be recognised, so first-pass yield is optimistic for them"
        )
    return "no tests in the selection"


def yield_from_counts(
    verdict_counts: pd.DataFrame,
    first_pass_counts: pd.DataFrame | None = None,
    by: Sequence[str] = (),
    *,
    count_col: str = "n",
) -> pd.DataFrame:
    """Yields from the store's pre-aggregated counts (no row loading).

    ``verdict_counts`` has the grouping columns, ``verdict`` and ``n``. ``first_pass_counts`` is
    either the store's shape (grouping columns, ``parts``, ``first_pass``, ``final_pass``, …)
    or ``verdict`` + ``n`` of each part's first test. Returns one row per group with tests,
    aborted, passed_tests, test_yield and, with first-pass counts, parts, first_pass,
    first_pass_yield (and final_pass, final_yield when given).
    """
    by = list(by)

    def fold(frame: pd.DataFrame, prefix: str) -> pd.DataFrame:
        _require(frame, [*by, "verdict", count_col])
        f = frame.assign(verdict=frame["verdict"].astype(str).str.lower())
        f = f.assign(
            _total=f[count_col],
            _aborted=np.where(f["verdict"] == _ABORTED, f[count_col], 0),
            _pass=np.where(f["verdict"] == _PASS, f[count_col], 0),
        )
        if by:
            g = f.groupby(by, dropna=False)[["_total", "_aborted", "_pass"]].sum().reset_index()
        else:
            g = pd.DataFrame([f[["_total", "_aborted", "_pass"]].sum()])
        return g.rename(
            columns={
                "_total": f"{prefix}total",
                "_aborted": f"{prefix}aborted",
                "_pass": f"{prefix}pass",
            }
        )

    tests = fold(verdict_counts, "t_")
    out = pd.DataFrame({**{k: tests[k] for k in by}})
    out["tests"] = tests["t_total"].astype(int)
    out["aborted"] = tests["t_aborted"].astype(int)
    out["passed_tests"] = tests["t_pass"].astype(int)
    counted = out["tests"] - out["aborted"]
    out["test_yield"] = (out["passed_tests"] / counted).where(counted > 0)
    if first_pass_counts is not None:
        if "parts" in first_pass_counts.columns:  # the store's shape: parts, first_pass, ...
            _require(first_pass_counts, [*by, "parts", "first_pass"])
            cols = [c for c in ("parts", "first_pass", "final_pass", "tests", "no_part_id")
                    if c in first_pass_counts.columns]  # fmt: skip
            fp = (first_pass_counts.groupby(by, dropna=False)[cols].sum().reset_index() if by
                  else pd.DataFrame([first_pass_counts[cols].sum()]))  # fmt: skip
            # the store's ``tests`` counts tests of those parts: keep it apart from ``tests``
            fp = fp.rename(columns={"tests": "part_tests"})
            cols = ["part_tests" if c == "tests" else c for c in cols]
            merged = out.merge(fp, on=by, how="left") if by else pd.concat([out, fp], axis=1)
            merged = merged.fillna({c: 0 for c in cols})
            for c in cols:
                out[c] = merged[c].astype(int).to_numpy()
        else:  # verdict + n of each part's first test
            fp = fold(first_pass_counts, "f_")
            merged = out.merge(fp, on=by, how="left") if by else pd.concat([out, fp], axis=1)
            merged = merged.fillna({"f_total": 0, "f_aborted": 0, "f_pass": 0})
            out["parts"] = (merged["f_total"] - merged["f_aborted"]).astype(int).to_numpy()
            out["first_pass"] = merged["f_pass"].astype(int).to_numpy()
        out["first_pass_yield"] = (out["first_pass"] / out["parts"]).where(out["parts"] > 0)
        if "final_pass" in out.columns:
            out["final_yield"] = (out["final_pass"] / out["parts"]).where(out["parts"] > 0)
    return out


@dataclass(frozen=True, slots=True)
class ParetoRow(ResultMixin):
    category: str
    n: int
    share: float
    cumulative_share: float


@dataclass(frozen=True, slots=True)
class ParetoReport(ResultMixin):
    """Categories by falling count with their share and cumulative share (the Pareto chart)."""

    column: str
    total: int
    rows: list[ParetoRow] = field(default_factory=list)


def _pareto_rows(counts: pd.Series) -> list[ParetoRow]:
    counts = counts[counts > 0]
    ordered = sorted(counts.items(), key=lambda kv: (-kv[1], str(kv[0])))
    total = int(sum(v for _, v in ordered))
    rows, running = [], 0
    for category, n in ordered:
        running += int(n)
        rows.append(ParetoRow(str(category), int(n), int(n) / total, running / total))
    return rows


def pareto(
    results: pd.DataFrame,
    column: Literal["reason", "verdict"] = "reason",
    verdicts: Sequence[str] | None = ("reject", "gross"),
) -> ParetoReport:
    """Pareto of reject reasons (default) or verdicts over the tests with one of ``verdicts``."""
    _require(results, [column, "verdict"])
    df = results
    if verdicts is not None:
        df = df[df["verdict"].astype(str).str.lower().isin([v.lower() for v in verdicts])]
    values = df[column].fillna("").astype(str).str.strip().replace("", "(no reason given)")
    counts = values.value_counts()
    rows = _pareto_rows(counts)
    return ParetoReport(column=column, total=sum(r.n for r in rows), rows=rows)


def pareto_from_counts(
    counts: pd.DataFrame,
    column: str = "verdict",
    count_col: str = "n",
    verdicts: Sequence[str] | None = None,
) -> ParetoReport:
    """Pareto from pre-aggregated counts (a store's ``verdict_counts``), the same as ``pareto``
    over the rows they count: ``verdicts`` keeps those verdicts only, and a blank reason is
    shown as "(no reason given)"."""
    _require(counts, [column, count_col])
    df = counts
    if verdicts is not None:
        _require(df, ["verdict"])
        df = df[df["verdict"].astype(str).str.lower().isin([v.lower() for v in verdicts])]
    values = df[column].fillna("").astype(str).str.strip()
    if column == "reason":
        values = values.replace("", "(no reason given)")
    series = df[count_col].groupby(values).sum()
    rows = _pareto_rows(series[series > 0])
    return ParetoReport(column=column, total=sum(r.n for r in rows), rows=rows)
