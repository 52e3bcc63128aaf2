"""Backing a test time down on the computer: every shorter test as a window of long ones.

Setting up a pressure-decay test, the trade starts with a long cycle, calibrates, and backs the
stabilise and test times down until the test stops being repeatable (common practice). With the
pressure curves of a handful of long tests this needs no trial runs: a test of stabilise S and
test T reads the pressure at S and at S + T after isolation, so its loss is a window of a longer
curve recorded after the same fill. From master-part curves (the zero) and master-plus-standard
curves (the span) at one long cycle, ``backdown_map`` emulates every shorter (S, T) pair,
estimates the loss scatter and the span for each, and from them %GRR against the tolerance and
the calibration ratio; it names the shortest cycle that meets the target with a margin (the
upper confidence bound of σ), and says where the data are too thin to decide.
``stabilisation`` estimates when the thermal transient after fill has settled.

Assumptions (stated in every result and checked where the data allow):
- a window of one long test stands for a separate short test with the same fill: the gas has
  the same history up to the window's end (a shorter *fill* would change the thermal history;
  fill is not varied here);
- the recorded tests represent the variation a production test sees (the master part's
  temperature scatter, the transducer noise); windows of one curve are correlated, so each
  (S, T) pair uses one window per curve and its scatter is between curves;
- the station reads a pressure as the mean over ``average_s`` around the instant (0: one
  sample, linearly interpolated between samples);
- the leak standard's flow is constant over the test (checked: the span grows in proportion to
  the test time once the transient has settled);
- the total pressure change stays small against the test pressure (ASTM E2930 asks for about
  10 % at most; points beyond ``max_loss_share`` are refused).

Pure: numpy and scipy only; no I/O.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass, field

import numpy as np
from scipy import optimize, stats

from analytics._result import ResultMixin
from gateway.records import PressureTrace

__all__ = [
    "BackdownMap",
    "Curve",
    "MapPoint",
    "SettleEstimate",
    "backdown_map",
    "curve_of",
    "stabilisation",
    "window_losses",
]

#: %GRR = 100 · K_SIGMA · σ / tolerance (6 σ, the AIAG MSA 4th edition spread)
K_SIGMA = 6.0


@dataclass(frozen=True, slots=True)
class Curve:
    """Pressure samples from isolation (end of fill) on: ``values[i]`` at ``i·interval_s``."""

    interval_s: float
    values: np.ndarray

    @property
    def duration_s(self) -> float:
        return (len(self.values) - 1) * self.interval_s

    def at(self, t: float, average_s: float = 0.0) -> float:
        """Reading at ``t`` s after isolation (mean over ``average_s`` around it)."""
        if average_s <= 0:
            return float(np.interp(t, self._times(), self.values))
        lo, hi = t - average_s / 2, t + average_s / 2
        grid = np.linspace(lo, hi, max(3, round(average_s / self.interval_s) + 1))
        return float(np.interp(grid, self._times(), self.values).mean())

    def _times(self) -> np.ndarray:
        return np.arange(len(self.values)) * self.interval_s


def curve_of(trace: PressureTrace) -> Curve:
    """The isolated part of a trace: from the start of stabilise to the start of dump."""
    start = trace.phase_start("stabilise")
    if start is None:
        raise ValueError(
            f"{trace.station} cycle {trace.cycle}: the trace does not say where stabilise starts"
        )
    stop = trace.phase_start("dump")
    values = np.asarray(trace.pressures_pa, dtype=float)
    first = math.ceil(start / trace.sample_interval_s - 1e-9)
    last = len(values) if stop is None else math.floor(stop / trace.sample_interval_s + 1e-9)
    # the first sample at or after isolation; the offset of a fraction of a sample is shifted
    # onto the grid by interpolation
    t_first = first * trace.sample_interval_s
    part = values[first:last + 1] if stop is not None else values[first:]
    if len(part) < 2:
        raise ValueError(f"{trace.station} cycle {trace.cycle}: no samples after isolation")
    if t_first > start + 1e-9 and first > 0:
        shift = (t_first - start) / trace.sample_interval_s
        grid = np.arange(len(part)) + first - shift
        part = np.interp(grid, np.arange(len(values)), values)
    return Curve(trace.sample_interval_s, np.asarray(part, dtype=float))


def window_losses(
    curves: Sequence[Curve], stabilise_s: float, test_s: float, average_s: float = 0.0
) -> np.ndarray:
    """The loss a test of (stabilise, test) would measure, one per curve."""
    end = stabilise_s + test_s
    out = []
    for c in curves:
        if end > c.duration_s + 1e-9:
            raise ValueError(f"stabilise {stabilise_s:g} s + test {test_s:g} s is longer than "
                             f"the recorded curve ({c.duration_s:g} s after isolation)")
        out.append(c.at(stabilise_s, average_s) - c.at(end, average_s))
    return np.asarray(out, dtype=float)


# -- stabilisation -----------------------------------------------------------------------------


@dataclass(frozen=True, slots=True)
class SettleEstimate(ResultMixin):
    """When the thermal transient after fill no longer matters.

    Fit of the mean curve ``p(t) = a − L·t + A·exp(−t/τ)``; settled when the transient's rate
    ``|A|/τ·exp(−t/τ)`` falls below ``criterion_rate_pa_s``.
    """

    n: int
    settle_s: float | None
    low_s: float | None
    high_s: float | None
    confidence: float
    tau_s: float | None
    amplitude_pa: float | None
    leak_rate_pa_s: float | None
    criterion_rate_pa_s: float
    note: str


def _model(t: np.ndarray, a: float, rate: float, amp: float, tau: float) -> np.ndarray:
    return a - rate * t + amp * np.exp(-t / tau)


def _fit(times: np.ndarray, mean: np.ndarray) -> tuple[float, float, float, float] | None:
    span = float(times[-1])
    tail = times > span / 2
    slope = -np.polyfit(times[tail], mean[tail], 1)[0] if tail.sum() >= 2 else 0.0
    a0 = float(mean[-1] + slope * span)
    amp0 = float(mean[0] - a0)
    best = None
    for tau0 in (span / 20, span / 8, span / 3):  # a few starts: the fit is not convex in τ
        try:
            params, _ = optimize.curve_fit(
                _model, times, mean, p0=(a0, slope, amp0, tau0),
                bounds=([-np.inf, -np.inf, -np.inf, times[1] / 4], [np.inf, np.inf, np.inf,
                                                                      span * 4]),
                maxfev=5000,
            )
        except (RuntimeError, ValueError):
            continue
        residual = float(np.sum((_model(times, *params) - mean) ** 2))
        if best is None or residual < best[0]:
            best = (residual, params)
    if best is None:
        return None
    a, rate, amp, tau = (float(x) for x in best[1])
    return a, rate, amp, tau


def _settle_time(amp: float, tau: float, criterion: float) -> float:
    initial = abs(amp) / tau
    return 0.0 if initial <= criterion else tau * math.log(initial / criterion)


def stabilisation(
    curves: Sequence[Curve],
    criterion_rate_pa_s: float,
    *,
    confidence: float = 0.9,
    resamples: int = 200,
    seed: int = 0,
) -> SettleEstimate:
    """When the decay rate after fill becomes constant: the thermal transient's own rate
    below ``criterion_rate_pa_s`` (e.g. a tenth of the loss rate a reject-limit leak makes),
    with a bootstrap interval over the curves."""
    if not criterion_rate_pa_s > 0:
        raise ValueError("the settling criterion must be a rate above 0 Pa/s")
    if len(curves) < 2:
        raise ValueError(f"stabilisation needs at least 2 curves, got {len(curves)}")
    length = min(len(c.values) for c in curves)
    interval = curves[0].interval_s
    if any(abs(c.interval_s - interval) > 1e-12 for c in curves):
        raise ValueError("curves must share one sample interval")
    stack = np.vstack([c.values[:length] for c in curves])
    times = np.arange(length) * interval
    fit = _fit(times, stack.mean(axis=0))
    if fit is None:
        return SettleEstimate(len(curves), None, None, None, confidence, None, None, None,
                              criterion_rate_pa_s, "the curves do not fit a settling transient")
    _, rate, amp, tau = fit
    settle = _settle_time(amp, tau, criterion_rate_pa_s)
    rng = np.random.default_rng(seed)
    boots = []
    for _ in range(resamples):
        pick = rng.integers(0, len(curves), len(curves))
        f = _fit(times, stack[pick].mean(axis=0))
        if f is not None:
            boots.append(_settle_time(f[2], f[3], criterion_rate_pa_s))
    low = high = None
    note = ""
    if len(boots) >= resamples // 2:
        q = (1 - confidence) / 2
        low, high = (float(x) for x in np.quantile(boots, [q, 1 - q]))
    else:
        note = "too few bootstrap fits converged for an interval"
    if settle > times[-1]:
        note = "; ".join(filter(None, [note, "not settled within the recorded curves"]))
    return SettleEstimate(len(curves), settle, low, high, confidence, tau, amp, rate,
                          criterion_rate_pa_s, note)


# -- the back-down map -------------------------------------------------------------------------


@dataclass(frozen=True, slots=True)
class MapPoint(ResultMixin):
    stabilise_s: float
    test_s: float
    cycle_s: float  # stabilise + test + the fixed part (fill, dump, handling)
    master_mean_pa: float
    master_sd_pa: float
    standard_mean_pa: float
    span_pa: float
    ratio: float | None  # standard loss / master loss; undefined when the master loss <= 0
    sensitivity: float  # sccm per Pa of span
    sigma_sccm: float
    pct_grr: float
    pct_grr_low: float
    pct_grr_high: float
    verdict: str  # "meets", "fails", "undecided" (the target inside the interval), "invalid"


@dataclass(frozen=True, slots=True)
class BackdownMap(ResultMixin):
    n_master: int
    n_standard: int
    tolerance_sccm: float
    target_pct: float
    confidence: float
    recorded_s: float
    points: list[MapPoint]
    chosen: MapPoint | None
    longest: MapPoint | None
    thin: bool
    checks: list[str]
    notes: list[str]
    assumptions: str = field(default="")


_ASSUMPTIONS = (
    "each (stabilise, test) is emulated as a window of the recorded long tests after the same "
    "fill; the recorded tests represent production variation; %GRR = 100·6·σ/tolerance with σ "
    "the master part's loss scatter between tests converted by the window's own sensitivity; "
    "the chosen cycle meets the target at the upper {conf:.0%} confidence bound of σ; the leak "
    "standard's flow is constant over the test"
)


def _grid(lo: float, hi: float, step: float) -> list[float]:
    n = math.floor((hi - lo) / step + 1e-9)
    return [round(lo + i * step, 9) for i in range(n + 1)]


def backdown_map(
    master: Sequence[Curve],
    standard: Sequence[Curve],
    *,
    standard_sccm: float,
    tolerance_sccm: float,
    target_pct: float = 10.0,
    stabilise_s: Sequence[float] | None = None,
    test_s: Sequence[float] | None = None,
    step_s: float = 0.5,
    min_stabilise_s: float = 0.0,
    min_test_s: float = 0.5,
    fixed_s: float = 0.0,
    average_s: float = 0.0,
    confidence: float = 0.95,
    test_pressure_pa: float | None = None,
    max_loss_share: float = 0.1,
) -> BackdownMap:
    """%GRR and calibration window for every shorter (stabilise, test), and the shortest
    cycle that meets ``target_pct`` at the upper confidence bound of the loss scatter.

    ``tolerance_sccm`` is the tolerance %GRR is judged against (with an upper reject limit
    only, the caller states which one-sided convention it uses); ``fixed_s`` is the part of the
    cycle that does not change (fill, dump, handling), added to each point's cycle time.
    """
    if len(master) < 3:
        raise ValueError(f"the map needs at least 3 master-part curves, got {len(master)}")
    if len(standard) < 2:
        raise ValueError(f"the map needs at least 2 master-plus-standard curves, "
                         f"got {len(standard)}")
    if not standard_sccm > 0 or not tolerance_sccm > 0 or not target_pct > 0:
        raise ValueError("standard flow, tolerance and target must be above 0")
    recorded = min(c.duration_s for c in [*master, *standard])
    stabs = list(stabilise_s) if stabilise_s is not None else _grid(
        max(min_stabilise_s, 0.0), recorded - min_test_s, step_s)
    tests = list(test_s) if test_s is not None else _grid(min_test_s, recorded, step_s)
    n_m = len(master)
    dof = n_m - 1
    q = (1 - confidence) / 2
    # σ_true / σ_est within [sqrt(dof/χ²_hi), sqrt(dof/χ²_lo)] (chi-square interval)
    lo_factor = math.sqrt(dof / float(stats.chi2.ppf(1 - q, dof)))
    hi_factor = math.sqrt(dof / float(stats.chi2.ppf(q, dof)))
    points: list[MapPoint] = []
    notes: list[str] = []
    refused_share = 0
    for s in stabs:
        for t in tests:
            if s < min_stabilise_s - 1e-9 or s + t > recorded + 1e-9 or t < min_test_s - 1e-9:
                continue
            m = window_losses(master, s, t, average_s)
            st = window_losses(standard, s, t, average_s)
            m_mean, m_sd = float(m.mean()), float(m.std(ddof=1))
            s_mean = float(st.mean())
            span = s_mean - m_mean
            if test_pressure_pa and s_mean > max_loss_share * test_pressure_pa:
                refused_share += 1
                continue
            cycle = round(s + t + fixed_s, 9)
            if not span > 0:
                points.append(MapPoint(s, t, cycle, m_mean, m_sd, s_mean, span, None,
                                       math.nan, math.nan, math.nan, math.nan, math.nan,
                                       "invalid"))
                continue
            sens = standard_sccm / span
            sigma = m_sd * sens
            pct = 100.0 * K_SIGMA * sigma / tolerance_sccm
            low, high = pct * lo_factor, pct * hi_factor
            verdict = "meets" if high <= target_pct else "fails" if low > target_pct \
                else "undecided"
            points.append(MapPoint(s, t, cycle, m_mean, m_sd, s_mean, span,
                                   s_mean / m_mean if m_mean > 0 else None, sens, sigma, pct,
                                   low, high, verdict))
    if refused_share:
        notes.append(f"{refused_share} (stabilise, test) pairs left out: the loss exceeds "
                     f"{max_loss_share:.0%} of the test pressure")
    meeting = [p for p in points if p.verdict == "meets"]
    chosen = min(meeting, key=lambda p: (p.cycle_s, p.stabilise_s)) if meeting else None
    valid = [p for p in points if p.verdict != "invalid"]
    longest = max(valid, key=lambda p: (p.stabilise_s + p.test_s, p.test_s)) if valid else None
    thin = n_m < 10 or len(standard) < 3
    if thin:
        notes.append(f"thin data: {n_m} master and {len(standard)} standard curves; σ is known "
                     f"only within ×{lo_factor:.2f}..×{hi_factor:.2f}")
    if chosen is None:
        if any(p.verdict == "undecided" for p in points):
            notes.append("no cycle meets the target for certain: more long tests would decide "
                         "the undecided ones")
        else:
            notes.append(f"no recorded cycle reaches {target_pct:g} %GRR")
    return BackdownMap(
        n_master=n_m, n_standard=len(standard), tolerance_sccm=tolerance_sccm,
        target_pct=target_pct, confidence=confidence, recorded_s=recorded, points=points,
        chosen=chosen, longest=longest, thin=thin,
        checks=_checks(points), notes=notes,
        assumptions=_ASSUMPTIONS.format(conf=confidence),
    )


def _checks(points: Sequence[MapPoint]) -> list[str]:
    """What the data say about the assumptions: a constant-flow standard makes a span that
    grows in proportion to the test time once settled."""
    out: list[str] = []
    by_stab: dict[float, list[MapPoint]] = {}
    for p in points:
        if p.verdict != "invalid":
            by_stab.setdefault(p.stabilise_s, []).append(p)
    usable = [s for s, group in by_stab.items() if len(group) >= 3]
    if usable:
        s_late = max(usable)  # the most settled stabilise that still has a range of test times
        late = sorted(by_stab[s_late], key=lambda p: p.test_s)
        t = np.array([p.test_s for p in late])
        span = np.array([p.span_pa for p in late])
        slope, intercept = np.polyfit(t, span, 1)
        rel = abs(intercept) / float(span[-1]) if span[-1] else math.inf
        word = "holds" if rel < 0.05 else "questionable"
        out.append(f"span ∝ test time at stabilise {s_late:g} s {word}: intercept "
                   f"{intercept:.3g} Pa against a span of {span[-1]:.3g} Pa "
                   f"({rel:.1%}), slope {slope:.4g} Pa/s")
    return out
