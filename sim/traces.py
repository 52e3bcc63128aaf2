"""Pressure traces of simulated tests: fill, stabilise, test and dump, sampled at a fixed rate.

Fill raises the pressure towards the test pressure through the supply's restriction (first
order, time constant ``fill_tau_s``) while the compression heats the gas; at isolation the gas
model of ``sim.physics`` takes over (the fill heat relaxing with its own time constant, the
part wall's temperature, the leaks); dump vents to atmosphere (first order, a fifth of the dump
time). The samples carry the transducer's noise and resolution.

Pure: no I/O; noise from the ``random.Random`` the caller passes.
"""

from __future__ import annotations

import math
import random
from dataclasses import dataclass

from sim.physics import TestConditions, TestOutcome, isolated_curve

__all__ = ["SimTrace", "simulate_trace", "trace_of_test"]


@dataclass(frozen=True, slots=True)
class SimTrace:
    """Samples (gauge Pa) from the start of fill, and where each phase starts (s)."""

    interval_s: float
    pressures_pa: tuple[float, ...]
    phases: tuple[tuple[str, float], ...]


def _reading(c: TestConditions, value: float, rng: random.Random | None) -> float:
    if c.noise_pa > 0 and rng is not None:
        value += rng.gauss(0.0, c.noise_pa)
    if c.resolution_pa > 0:
        value = round(value / c.resolution_pa) * c.resolution_pa
    return value


def simulate_trace(
    c: TestConditions,
    *,
    fill_s: float,
    dump_s: float = 1.0,
    interval_s: float = 0.05,
    fill_tau_s: float | None = None,
    rng: random.Random | None = None,
) -> SimTrace:
    """One test's trace: ``fill_s`` of fill, then ``c.stabilise_s`` and ``c.test_s``
    isolated, then ``dump_s`` of venting."""
    if not interval_s > 0 or fill_s < 0 or dump_s < 0:
        raise ValueError("interval must be above 0 s; fill and dump times not negative")
    target = c.test_pressure_pa if c.start_pressure_pa is None else c.start_pressure_pa
    tau = fill_tau_s if fill_tau_s is not None else max(fill_s / 5.0, interval_s)
    n_fill = round(fill_s / interval_s)
    scale = 1.0 - math.exp(-fill_s / tau) if fill_s > 0 else 1.0
    samples = [
        _reading(c, target * (1.0 - math.exp(-i * interval_s / tau)) / scale, rng)
        for i in range(n_fill)
    ]
    isolated = c.stabilise_s + c.test_s
    n_iso = round(isolated / interval_s)
    times = [i * interval_s for i in range(n_iso + 1)]
    curve = isolated_curve(c, times, rng)
    samples += curve
    p_end = curve[-1]
    n_dump = round(dump_s / interval_s)
    dump_tau = max(dump_s / 5.0, interval_s)
    samples += [
        _reading(c, p_end * math.exp(-(i + 1) * interval_s / dump_tau), rng)
        for i in range(n_dump)
    ]
    iso_at = n_fill * interval_s
    phases = (
        ("fill", 0.0),
        ("stabilise", iso_at),
        ("test", iso_at + c.stabilise_s),
        ("dump", iso_at + isolated),
        ("end", (len(samples) - 1) * interval_s),
    )
    return SimTrace(interval_s, tuple(samples), phases)


def trace_of_test(
    c: TestConditions, outcome: TestOutcome, *, fill_s: float, interval_s: float,
    rng: random.Random,
) -> SimTrace:
    """The curve of the test ``outcome`` reports: the same conditions, its own sample noise,
    and the two readings the station judged by at the start and end of the test window, so the
    curve's loss over the window is the result's loss exactly (a station's trace and its result
    come from one transducer)."""
    tr = simulate_trace(c, fill_s=fill_s, interval_s=interval_s, rng=rng)
    test_at = dict(tr.phases)["test"]
    first = round(test_at / interval_s)
    last = round((test_at + c.test_s) / interval_s)
    samples = list(tr.pressures_pa)
    if 0 <= first < last < len(samples):
        samples[first] = outcome.pressure_at_test_start_pa
        samples[last] = outcome.pressure_at_test_end_pa
    return SimTrace(tr.interval_s, tuple(samples), tr.phases)
