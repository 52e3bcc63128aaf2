"""An in-memory stand-in for the QueryStore protocol (unit tests of `leakfleet report` only)."""

from __future__ import annotations

from datetime import UTC, datetime, timedelta

import numpy as np
import pandas as pd

from analytics.frames import calibrations_frame, results_frame
from gateway.records import CalibrationEvent, TestResult

T0 = datetime(2026, 3, 2, 5, 0, tzinfo=UTC)


class FakeStore:
    """Filters canned DataFrames the way the store's query methods are documented to."""

    def __init__(self, results: pd.DataFrame, calibrations: pd.DataFrame) -> None:
        self._results, self._calibrations = results, calibrations
        self.closed = False

    @staticmethod
    def _filter(df: pd.DataFrame, since: datetime, until: datetime, **eq: object) -> pd.DataFrame:
        mask = (df["ended_at"] >= since) & (df["ended_at"] < until)
        for col, value in eq.items():
            if value is not None:
                mask &= df[col] == value
        return df[mask].reset_index(drop=True)

    def results(
        self, since, until, station=None, line=None, program=None, part_id=None, limit=None
    ):  # type: ignore[no-untyped-def]
        return self._filter(self._results, since, until, station=station, line=line,
                            program=program, part_id=part_id)  # fmt: skip

    def calibrations(self, since, until, station=None, line=None, program=None):  # type: ignore[no-untyped-def]
        return self._filter(self._calibrations, since, until, station=station, line=line,
                            program=program)  # fmt: skip

    @staticmethod
    def _latest(df: pd.DataFrame) -> pd.DataFrame:
        if df.empty:
            return df
        return df.sort_values("ended_at").groupby("station").tail(1).reset_index(drop=True)

    def latest_results_per_station(self) -> pd.DataFrame:
        return self._latest(self._results)

    def latest_calibration_per_station(self) -> pd.DataFrame:
        return self._latest(self._calibrations)

    def close(self) -> None:
        self.closed = True


def demo_store(seed: int = 1) -> FakeStore:
    """The demo records (see ``demo_records``) behind the in-memory store."""
    results, cals = demo_records(seed)
    return FakeStore(results_frame(results), calibrations_frame(cals))


def demo_records(seed: int = 1) -> tuple[list[TestResult], list[CalibrationEvent]]:
    """Two stations of line L1, program HX-210: 40 parts (some retested), a gauge study of
    5 parts × 2 stations × 3 trials, 3 candidate masters, and 20 daily calibrations per
    station, the second station's master loss creeping up."""
    rng = np.random.default_rng(seed)
    results: list[TestResult] = []
    cycle = {"L1-S1": 0, "L1-S2": 0}
    at = T0

    def add(station: str, part: str | None, leak: float) -> None:
        nonlocal at
        at += timedelta(minutes=1)
        cycle[station] += 1
        verdict = "pass" if leak <= 2.0 else ("gross" if leak > 20 else "reject")
        results.append(TestResult(
            station=station, line="L1", cycle=cycle[station], ended_at=at, received_at=at,
            program="HX-210", verdict=verdict, test_pressure_pa=50_000.0,
            pressure_loss_pa=20.0 + leak * 8.0, leak_rate_sccm=leak, reject_limit_sccm=2.0,
            fill_s=2.0, stabilise_s=3.0, test_s=4.0, part_id=part,
            reason="" if verdict == "pass" else "leak above limit", lower_limit_sccm=-2.0,
        ))  # fmt: skip

    for i in range(40):
        station = "L1-S1" if i % 2 else "L1-S2"
        leak = float(rng.lognormal(-1.0, 0.6)) - 0.2
        if i % 10 == 3:
            leak = 2.6  # reject, then retest passes
        add(station, f"HX210-{i:04d}", leak)
        if leak > 2.0:
            add("L1-S1", f"HX210-{i:04d}", 1.1)
    for part in range(5):
        true = -0.5 + 0.4 * part
        for station in ("L1-S1", "L1-S2"):
            for _ in range(3):
                add(station, f"GRR-{part}", true + float(rng.normal(0, 0.05)))
    pattern = (-1.5, 0.5, -1.0, 1.0, 0.0, -0.5, 1.5, 0.0)
    for name, mean, sd in (("M-A", -0.30, 0.02), ("M-B", -0.35, 0.025), ("M-C", 0.10, 0.02)):
        for z in pattern:
            add("L1-S1", name, mean + sd * z)
    for _ in range(3):
        add("L1-S1", None, 0.5)

    cals: list[CalibrationEvent] = []
    for station, creep in (("L1-S1", 0.0), ("L1-S2", 0.4)):
        for day in range(20):
            ended = T0 - timedelta(days=20 - day)
            master = 20.0 + creep * day + float(rng.normal(0, 0.3))
            standard = master + 40.0 + float(rng.normal(0, 0.5))
            cals.append(CalibrationEvent(
                station=station, line="L1", ended_at=ended, received_at=ended, program="HX-210",
                master_loss_pa=master, standard_loss_pa=standard, standard_sccm=5.0,
                standard_ref_pressure_pa=50_000.0, ratio=standard / master,
                sensitivity=5.0 / (standard - master), passed=True,
            ))  # fmt: skip
    return results, cals
