"""Capability report: Ppu/Cpu with confidence bounds and a histogram per program."""

from __future__ import annotations

import argparse
from collections.abc import Callable
from typing import Any

from gateway.reports.common import (
    Filters,
    Report,
    filters_from,
    latest_lower,
    quantity,
    store_results,
)
from gateway.reports.tables import num, pct, table


def build(args: argparse.Namespace, get_store: Callable[[], Any]) -> Report:
    """The CLI's options: the range and filters, --by-station, --bins, --guard-band."""
    f = filters_from(args, get_store=get_store)
    guard = quantity(args.guard_band, "leak", "sccm", "--guard-band")
    return capability_report_of(get_store(), f, by_station=args.by_station, bins=args.bins,
                                guard_band_sccm=guard)


def capability_report_of(store: Any, f: Filters, *, by_station: bool = False,
                         bins: int | None = None, guard_band_sccm: float | None = None) -> Report:
    """Capability (Ppu, Cpu, the best-fitting model) and a histogram per program, or per
    station and program, over the store's results in ``f``."""
    from analytics import capability, histogram

    guard = guard_band_sccm
    results = store_results(store, f)
    results = results[results["verdict"].astype(str) != "aborted"]
    keys = ["station", "program"] if by_station else ["program"]
    studies, rows, notes = [], [], []
    for key, g in results.sort_values("ended_at").groupby(keys, sort=True):
        key_t = key if isinstance(key, tuple) else (key,)
        label = "/".join(str(k) for k in key_t)
        limit = float(g["reject_limit_sccm"].iloc[-1])
        lower = latest_lower(g)
        if g["reject_limit_sccm"].nunique() > 1:
            notes.append(
                f"{label}: reject limit changed in the period; using the latest ({limit:g} sccm)"
            )
        values = g["leak_rate_sccm"].to_numpy(dtype=float)
        if len(values) < 2:
            notes.append(f"{label}: only {len(values)} reading(s), skipped")
            continue
        try:
            # the within σ of Cpu from each station's own sequence of readings
            cap = capability(values, limit, lower, guard_band=guard,
                             groups=g["station"].astype(str).to_numpy())
        except ValueError as exc:
            notes.append(f"{label}: {exc}")
            continue
        hist = histogram(
            values,
            method="fixed" if bins else "fd",
            bins=bins or 30,
            reject_limit=limit,
            lower_limit=lower,
        )
        studies.append(
            {
                "group": dict(zip(keys, map(str, key_t), strict=True)),
                "capability": cap.to_dict(),
                "histogram": hist.to_dict(),
            }
        )
        nn = cap.non_normal
        model_ppm = (cap.ppu.ppm_beyond_limit if cap.recommended == "normal" or nn is None
                     else nn.ppm_above)
        rows.append(
            [
                label,
                cap.n,
                num(cap.mean),
                num(cap.std),
                num(limit),
                f"{num(cap.ppu.value, '.2f')} "
                f"[{num(cap.ppu.lower, '.2f')}, {num(cap.ppu.upper, '.2f')}]",
                num(cap.cpu.value if cap.cpu else None, ".2f"),
                num(cap.ppu.ppm_beyond_limit, ".1f"),
                cap.recommended,
                num(model_ppm, ".1f"),
                pct(cap.guard_band_share),
            ]
        )
        notes.append(f"{label}: {cap.note}")
    text = table(
        [
            "program" if not by_station else "station/program",
            "n",
            "mean",
            "std",
            "limit",
            "Ppu [95 %]",
            "Cpu",
            "ppm (normal)",
            "model",
            "ppm (model)",
            "in guard band",
        ],
        rows,
    )
    if not rows:
        text = "No results with leak readings in the selection."
    text += "".join(f"\n  {n}" for n in notes)
    return Report("capability", f.to_dict(), {"studies": studies, "notes": notes}, text)
