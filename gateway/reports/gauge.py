"""Gauge studies: crossed gauge R&R and type 1, from a CSV file or the store."""

from __future__ import annotations

import argparse
from collections.abc import Callable
from dataclasses import dataclass
from typing import TYPE_CHECKING, Any

from gateway.reports.common import (
    Filters,
    Report,
    filters_from,
    quantity,
    reject_limit,
    store_results,
)
from gateway.reports.inputs import read_tidy_csv
from gateway.reports.tables import num, table

if TYPE_CHECKING:
    import pandas as pd


def balanced_from_store(results: pd.DataFrame) -> tuple[pd.DataFrame, str]:
    """Parts tested on every station, each (part, station) cut to the same number of trials."""
    import pandas as pd

    data = results[results["part_id"].notna() & (results["verdict"].astype(str) != "aborted")]
    data = data.sort_values("ended_at")
    stations = sorted(data["station"].unique())
    if len(stations) < 2:
        raise ValueError(
            "gauge R&R from the store needs parts tested on at least 2 stations "
            "(stations act as operators); use --input for other layouts"
        )
    counts = pd.crosstab(data["part_id"], data["station"])
    full = counts[(counts >= 2).all(axis=1)]
    if len(full) < 2:
        raise ValueError(
            "gauge R&R needs at least 2 part ids tested at least twice on every station"
        )
    trials = int(full.to_numpy().min())
    keep = data[data["part_id"].isin(full.index)]
    keep = keep.groupby(["part_id", "station"], sort=False).head(trials)
    tidy = pd.DataFrame(
        {"part": keep["part_id"], "operator": keep["station"], "value": keep["leak_rate_sccm"]}
    )
    note = (
        f"{len(full)} parts × {len(stations)} stations × {trials} trials "
        f"(stations as operators; {len(counts) - len(full)} part ids left out)"
    )
    return tidy, note


@dataclass(frozen=True)
class GrrOptions:
    """A crossed gauge R&R: from a CSV file (``input``: part,operator,value) or the store."""

    tolerance_sccm: float | None = None  # None from the store: one-sided at the reject limit
    input: str | None = None


@dataclass(frozen=True)
class Type1Options:
    """A type 1 study of one reference part: a CSV of readings (``input``) or its tests."""

    part: str | None = None
    reference_sccm: float | None = None
    tolerance_sccm: float | None = None
    input: str | None = None


def build_grr(args: argparse.Namespace, get_store: Callable[[], Any]) -> Report:
    """``leakfleet report grr``: its options, then ``grr_report_of``."""
    options = GrrOptions(quantity(args.tolerance, "leak", "sccm", "--tolerance"), args.input)
    if options.input:
        return grr_report_of(None, None, options)
    return grr_report_of(get_store(), filters_from(args, get_store=get_store), options)


def grr_report_of(store: Any | None, f: Filters | None, options: GrrOptions) -> Report:
    """Crossed gauge R&R from a CSV or from parts the store has tested on every station."""
    from analytics import grr_anova, grr_average_range

    tolerance = options.tolerance_sccm
    filters: dict[str, Any] | None
    one_sided = None
    if options.input:
        data = read_tidy_csv(options.input,
                             {"part": str, "operator": str, "value": float})
        source, filters = f"file {options.input}", None
    else:
        if store is None or f is None:
            raise ValueError("gauge R&R from the store needs the store and its filters")
        results = store_results(store, f)
        data, source = balanced_from_store(results)
        filters = f.to_dict()
        if tolerance is None:
            # a leak test has one real limit, the reject limit (the lower limit is only a
            # plausibility bound): without --tolerance it is taken one-sided
            one_sided = reject_limit(results)
    reports = [grr_anova(data, tolerance=tolerance, one_sided_limit=one_sided)]
    try:
        reports.append(grr_average_range(data, tolerance=tolerance, one_sided_limit=one_sided))
    except ValueError as exc:
        source += f"; average-and-range skipped: {exc}"
    rows = [
        [
            r.method,
            num(r.ev),
            num(r.av),
            num(r.grr),
            num(r.pv),
            num(r.tv),
            f"{r.pct_grr:.2f} %",
            "–" if r.pct_grr_tolerance is None else f"{r.pct_grr_tolerance:.2f} %",
            r.ndc,
            r.verdict,
        ]
        for r in reports
    ]
    text = (
        f"Gauge R&R ({source}): {reports[0].parts} parts, {reports[0].operators} operators, "
        f"{reports[0].trials} trials\n"
    )
    text += table(
        ["method", "EV", "AV", "GRR", "PV", "TV", "%GRR (TV)", "%GRR (tol)", "ndc", "verdict"], rows
    )
    text += "\n\nANOVA\n" + table(
        ["source", "df", "SS", "MS", "F", "p"],
        [
            [a.source, a.df, num(a.ss), num(a.ms), num(a.f), num(a.p, ".3g")]
            for a in reports[0].anova
        ],
    )
    text += "".join(f"\n  {r.method}: {r.note}" for r in reports)
    if reports[0].tolerance_convention:
        text += f"\n  tolerance: {reports[0].tolerance_convention}"
    for r in reports:
        text += "".join(f"\n  range check: {flag}" for flag in r.range_flags)
    result = {
        "source": source,
        "anova": reports[0].to_dict(),
        "average_range": reports[1].to_dict() if len(reports) > 1 else None,
    }
    return Report("grr", filters, result, text)


def build_type1(args: argparse.Namespace, get_store: Callable[[], Any]) -> Report:
    """``leakfleet report type1``: its options, then ``type1_report_of``."""
    options = Type1Options(
        args.part, quantity(args.reference, "leak", "sccm", "--reference"),
        quantity(args.tolerance, "leak", "sccm", "--tolerance"), args.input,
    )  # fmt: skip
    if options.input:
        return type1_report_of(None, None, options)
    if not options.part:
        raise ValueError("type1 from the store needs --part (the reference part's id)")
    return type1_report_of(get_store(), filters_from(args, get_store=get_store), options)


def type1_report_of(store: Any | None, f: Filters | None, options: Type1Options) -> Report:
    """Type 1 gauge study from a CSV of repeated readings of one reference part, or the
    reference part's tests in the store."""
    from analytics import type1_study

    reference, tolerance = options.reference_sccm, options.tolerance_sccm
    filters: dict[str, Any] | None = None
    if options.input:
        if reference is None or tolerance is None:
            raise ValueError("type1 --input needs --reference and --tolerance")
        values = read_tidy_csv(options.input, {"value": float})["value"].to_numpy()
        source = f"file {options.input}"
    else:
        if not options.part:
            raise ValueError("type1 from the store needs --part (the reference part's id)")
        if store is None or f is None:
            raise ValueError("type1 from the store needs the store and its filters")
        results = store_results(store, f, part_id=options.part)
        results = results[results["verdict"].astype(str) != "aborted"]
        if results.empty:
            raise ValueError(f"no results for part {options.part!r} in the selection")
        values = results["leak_rate_sccm"].to_numpy(dtype=float)
        reference = 0.0 if reference is None else reference
        convention = ""
        if tolerance is None:
            # one-sided: the reject limit is the only real limit, so the tolerance is twice
            # the distance from the reference to it (the lower limit is a plausibility bound)
            tolerance = 2.0 * (reject_limit(results) - reference)
            convention = ("one-sided: tolerance = 2 × (reject limit − reference); Cg and Cgk "
                          "then judge the gauge against the one limit that exists")
            if tolerance <= 0:
                raise ValueError("the reference part reads at or above the reject limit: "
                                 "give --tolerance")
        source, filters = f"part {options.part} from the store", f.to_dict()
        if convention:
            source += f"; {convention}"
    r = type1_study(values, reference, tolerance)
    text = table(
        ["n", "mean", "std", "reference", "bias", "bias p", "tolerance", "Cg", "Cgk", "capable"],
        [
            [
                r.n,
                num(r.mean),
                num(r.std),
                num(r.reference),
                num(r.bias),
                num(r.bias_p, ".3g"),
                num(r.tolerance),
                f"{r.cg:.2f}",
                f"{r.cgk:.2f}",
                "yes" if r.capable else "no",
            ]
        ],
    )
    text = f"Type 1 study ({source})\n{text}\n  {r.note}"
    return Report("type1", filters, {"source": source, **r.to_dict()}, text)
