"""Back-down report: the shortest stabilise + test time a station's long-cycle traces support.

Its JSON is the back-down map itself (not the common report document): station, program, the
standard's flow and the analytics result.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Any


@dataclass(frozen=True)
class BackdownReport:
    station: str
    program: str
    standard_sccm: float
    tolerance_sccm: float
    result: Any  # analytics.backdown map

    def to_json(self) -> dict[str, Any]:
        return {"station": self.station, "program": self.program,
                "standard_sccm": self.standard_sccm, **self.result.to_dict()}

    def text(self) -> str:
        result = self.result
        out = [f"Back-down map for {self.station} {self.program}: {result.n_master} master and "
               f"{result.n_standard} standard traces of {result.recorded_s:g} s; tolerance "
               f"{self.tolerance_sccm:g} sccm, target {result.target_pct:g} %GRR "
               f"(upper {result.confidence:.0%} bound)"]
        c = result.chosen
        if c is not None:
            out.append(f"Shortest cycle meeting the target: stabilise {c.stabilise_s:g} s + test "
                       f"{c.test_s:g} s (cycle {c.cycle_s:g} s): %GRR {c.pct_grr:.1f} "
                       f"({c.pct_grr_low:.1f}..{c.pct_grr_high:.1f}), span {c.span_pa:.3g} Pa"
                       + (f", ratio {c.ratio:.3g}" if c.ratio is not None else ""))
        if result.longest is not None:
            lp = result.longest
            out.append(f"Longest window of the recorded curves: stabilise {lp.stabilise_s:g} s "
                       f"+ test {lp.test_s:g} s: %GRR {lp.pct_grr:.1f}")
        out.append("\nShortest meeting test time per stabilise time:")
        best: dict[float, Any] = {}
        for pt in result.points:
            if pt.verdict == "meets" and (pt.stabilise_s not in best
                                          or pt.test_s < best[pt.stabilise_s].test_s):
                best[pt.stabilise_s] = pt
        shown = sorted(best.values(), key=lambda q: q.stabilise_s)
        stride = max(1, math.ceil(len(shown) / 15))
        out.append(f"{'stabilise s':>12} {'test s':>8} {'cycle s':>8} {'%GRR':>6} {'upper':>6}")
        out += [f"{pt.stabilise_s:>12g} {pt.test_s:>8g} {pt.cycle_s:>8g} {pt.pct_grr:>6.1f} "
                f"{pt.pct_grr_high:>6.1f}" for pt in shown[::stride]]
        out += [f"note: {line}" for line in [*result.checks, *result.notes]]
        out.append(f"assumptions: {result.assumptions}")
        return "\n".join(out)


def _newest(store: Any, method: str, station: str, program: str, column: str) -> float | None:
    frame = getattr(store, method)(None, None, station=station, program=program, limit=1,
                                   newest_first=True)
    if frame.empty or column not in frame or frame[column].isna().all():
        return None
    return float(frame[column].iloc[0])


def build_backdown(store_url: str, station: str, *, program: str | None = None,
                   tolerance: float | None = None, standard_sccm: float | None = None,
                   target: float = 10.0, step: float = 1.0, fixed: float = 0.0) -> BackdownReport:
    """The back-down map of ``station`` from the master/standard traces in ``store_url``;
    tolerance and standard flow default to the newest result's limit and calibration's flow."""
    from analytics.backdown import backdown_map, curve_of
    from gateway.store import open_journal, open_store
    from gateway.store.influx_traces import influx_traces
    from gateway.store.traces import traces

    if not 0 < step <= 60 or fixed < 0 or not 0 < target < 100:
        raise ValueError("--step: 0..60 s; --fixed: 0 s or more; --target: between 0 and 100")
    store = open_store(store_url)  # a journal that does not exist is refused, not created
    try:
        if store_url.startswith("sqlite:"):
            with open_journal(store_url) as journal:
                found = traces(journal, station, program=program, limit=5000)
        else:  # the central InfluxDB of a scale-out plant holds the curves its gateways sent
            found = [t for t in influx_traces(store, station, limit=5000)
                     if program is None or t.program == program]
        found = [t for t in found if t.role in ("master", "standard")]
        if not found:
            raise ValueError(f"no master or standard traces of {station} in {store_url} "
                             "(record a long-cycle study first, e.g. 'leakfleet sim study')")
        program = program or found[0].program
        found = [t for t in found if t.program == program]
        tolerance = tolerance or _newest(store, "results", station, program, "reject_limit_sccm")
        flow = standard_sccm or _newest(store, "calibrations", station, program, "standard_sccm")
    finally:
        store.close()
    if tolerance is None:
        raise ValueError(f"{station} {program}: no reject limit on record; give "
                         "--tolerance SCCM")
    if flow is None:
        raise ValueError(f"{station} {program}: no calibration with the standard's flow "
                         "on record; give --standard-sccm SCCM")
    master = [curve_of(t) for t in found if t.role == "master"]
    standard = [curve_of(t) for t in found if t.role == "standard"]
    result = backdown_map(master, standard, standard_sccm=flow, tolerance_sccm=tolerance,
                          target_pct=target, step_s=step, fixed_s=fixed)
    return BackdownReport(station, program, flow, tolerance, result)
