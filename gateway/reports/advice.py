"""Test-time advice from repeated readings of one part."""

from __future__ import annotations

import argparse
from collections.abc import Callable
from dataclasses import dataclass
from typing import Any, Literal

from gateway.reports.common import (
    Filters,
    Report,
    filters_from,
    latest_lower,
    quantity,
    store_calibrations,
    store_results,
)
from gateway.reports.inputs import csv_header, read_tidy_csv
from gateway.reports.tables import num, table


@dataclass(frozen=True)
class AdviceOptions:
    """Test-time advice: from a CSV (``input``: loss, or test_s,loss) or the store's
    calibrations; what the store does not say (test time, limits, sensitivity) given here."""

    input: str | None = None
    test_time_s: float | None = None
    reject_limit_sccm: float | None = None
    lower_limit_sccm: float | None = None
    max_test_time_s: float | None = None
    sensitivity: float | None = None
    test_pressure_pa: float | None = None
    target_pct: float = 10.0
    sqrt_fraction: float = 0.0  # share of the loss variance growing with test time


def options_from(args: argparse.Namespace) -> AdviceOptions:
    return AdviceOptions(
        input=args.input,
        test_time_s=quantity(args.test_time, "time", "s", "--test-time"),
        reject_limit_sccm=quantity(args.reject_limit, "leak", "sccm", "--reject-limit"),
        lower_limit_sccm=quantity(args.lower_limit, "leak", "sccm", "--lower-limit"),
        max_test_time_s=quantity(args.max_test_time, "time", "s", "--max-test-time"),
        sensitivity=args.sensitivity,
        test_pressure_pa=quantity(getattr(args, "test_pressure", None), "pressure", "Pa",
                                  "--test-pressure"),
        target_pct=args.target, sqrt_fraction=args.sqrt_fraction,
    )  # fmt: skip


def advise_times(options: AdviceOptions, test_s: float | None, sensitivity: float | None,
                 reject: float | None, lower: float | None) -> Report:
    """advise --input with columns test_s,loss: master tests at several test times."""
    from analytics.advice_fit import advise_from_times

    assert options.input is not None

    if test_s is None or sensitivity is None or reject is None:
        raise ValueError("advise --input with test_s needs --test-time (of the calibration), "
                         "--sensitivity and --reject-limit")
    data = read_tidy_csv(options.input, {"test_s": float, "loss": float})
    groups: dict[float, list[float]] = {}
    for t, loss in zip(data["test_s"].tolist(), data["loss"].tolist(), strict=True):
        groups.setdefault(float(t), []).append(float(loss))
    tolerance = reject - lower if lower is not None else 2.0 * reject  # one-sided: 2·limit
    a = advise_from_times(groups, test_s, sensitivity, tolerance,
                          target_pct=options.target_pct, reject_limit_sccm=reject,
                          test_pressure_pa=options.test_pressure_pa)
    rows = [[f"{t:g}", num(sig), n] for t, sig, n in zip(a.fit.times_s, a.fit.sigma_pa,
                                                          a.fit.n, strict=True)]
    text = (f"Test-time advice from master tests at {len(a.fit.times_s)} test times "
            f"(file {options.input})\n" + table(["test s", "σ loss Pa", "n"], rows)
            + f"\n  fit: {a.fit.model}; a = {a.fit.params['a']:.3g} Pa², "
            f"b = {a.fit.params['b']:.3g} Pa²/s, c = {a.fit.params['c']:.3g} Pa²/s²"
            + f"\n  {a.message}" + "".join(f"\n  assumes: {x}" for x in a.assumptions))
    return Report("advise", None, {"source": f"file {options.input}", **a.to_dict()}, text)


def build(args: argparse.Namespace, get_store: Callable[[], Any]) -> Report:
    """``leakfleet report advise``: its options, then ``advice_report_of``."""
    options = options_from(args)
    if options.input:
        return advice_report_of(None, None, options)
    return advice_report_of(get_store(), filters_from(args, get_store=get_store), options)


def advice_report_of(store: Any | None, f: Filters | None, options: AdviceOptions) -> Report:
    """Test-time advice from a CSV of master-part losses or the store's calibrations (their
    master losses)."""
    from analytics import advise_test_time

    test_s, reject = options.test_time_s, options.reject_limit_sccm
    lower, max_s = options.lower_limit_sccm, options.max_test_time_s
    sensitivity = options.sensitivity
    filters: dict[str, Any] | None = None
    if options.input:
        # master tests at several test times: the growth is measured
        if "test_s" in csv_header(options.input):
            return advise_times(options, test_s, sensitivity, reject, lower)
        losses = read_tidy_csv(options.input, {"loss": float})["loss"].to_numpy()
        if test_s is None or sensitivity is None or reject is None:
            raise ValueError("advise --input needs --test-time, --sensitivity and --reject-limit")
        source = f"file {options.input}"
        sigma_method: Literal["std", "moving-range"] = "std"
    else:
        # Calibrations are days apart: the moving range keeps slow drift out of the noise.
        sigma_method = "moving-range"
        if store is None or f is None:
            raise ValueError("advice from the store needs the store and its filters")
        cals = store_calibrations(store, f)
        cals = cals[cals["passed"].astype(bool)] if not cals.empty else cals
        pairs = sorted(
            {(str(s), str(p)) for s, p in zip(cals["station"], cals["program"], strict=True)}
        )
        if not pairs:
            raise ValueError("no passed calibrations in the selection")
        if len(pairs) > 1:
            raise ValueError(
                "advise works on one station and program; choose with --station and "
                f"--program from: {', '.join('/'.join(p) for p in pairs)}"
            )
        station, program = pairs[0]
        cals = cals.sort_values("ended_at")
        losses = cals["master_loss_pa"].to_numpy(dtype=float)
        sensitivity = (
            sensitivity if sensitivity is not None else float(cals["sensitivity"].iloc[-1])
        )
        results = store_results(store, Filters(f.since, f.until, station, None, program))
        if test_s is None or reject is None:
            if results.empty:
                raise ValueError(
                    f"no results for {station}/{program}: give --test-time and --reject-limit"
                )
            latest = results.sort_values("ended_at").iloc[-1]
            test_s = float(latest["test_s"]) if test_s is None else test_s
            reject = float(latest["reject_limit_sccm"]) if reject is None else reject
            if lower is None and options.reject_limit_sccm is None:
                lower = latest_lower(results.sort_values("ended_at"))
        source = f"{len(losses)} calibrations of {station}/{program} (master-part losses)"
        filters = f.to_dict()
    a = advise_test_time(
        losses,
        test_s,
        sensitivity,
        reject,
        lower,
        target_pct=options.target_pct,
        sqrt_fraction=options.sqrt_fraction,
        max_test_s=max_s,
        sigma_method=sigma_method,
    )
    step = max(1, len(a.curve) // 12)
    shown = a.curve[::step]
    text = (
        f"Test-time advice ({source})\n"
        f"  now: test {a.current_test_s:g} s, σ(loss) {a.sigma_loss_pa:.3g} Pa ({a.sigma_method}), "
        "sensitivity "
        f"{a.sensitivity:.4g} sccm/Pa, tolerance {a.tolerance_sccm:g} sccm "
        f"→ %GRR {a.current_pct_grr:.1f} %\n"
        f"  shortest test time for ≤ {a.target_pct:g} %: "
        f"{num(a.recommended_test_s, '.1f')} s (conservative, σ upper 95 %: "
        f"{num(a.conservative_test_s, '.1f')} s)\n\n"
        + table(
            ["test s", "σ loss Pa", "sccm/Pa", "σ leak sccm", "%GRR"],
            [
                [
                    f"{p.test_s:.2f}",
                    num(p.sigma_loss_pa, ".3g"),
                    num(p.sensitivity),
                    num(p.sigma_leak_sccm, ".3g"),
                    f"{p.pct_grr:.1f}",
                ]
                for p in shown
            ],
        )
        + f"\n  assumes: {a.assumptions}"
        + (f"\n  {a.note}" if a.note else "")
    )
    return Report("advise", filters, {"source": source, **a.to_dict()}, text)
