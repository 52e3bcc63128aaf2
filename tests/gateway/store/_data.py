"""Small hand-built records for the store tests (Northmere Works, lines L1/L2)."""

from __future__ import annotations

from datetime import UTC, datetime, timedelta
from typing import Any

from gateway.records import CalibrationEvent, Rejected, StationStatus, TestResult

T0 = datetime(2026, 3, 2, 6, 0, tzinfo=UTC)


def result(cycle: int = 1, **kw: Any) -> TestResult:
    ended = kw.pop("ended_at", T0 + timedelta(seconds=30 * cycle))
    base: dict[str, Any] = dict(
        station="L1-S1", line="L1", cycle=cycle, ended_at=ended,
        received_at=ended + timedelta(milliseconds=120), program="HX-210", verdict="pass",
        test_pressure_pa=300_000.0, pressure_loss_pa=12.5, leak_rate_sccm=0.42,
        reject_limit_sccm=2.0, fill_s=3.0, stabilise_s=6.0, test_s=4.0,
        part_id=f"HX210-{cycle:06d}", raw=f"raw line {cycle}", profile="lf-delim@1",
    )  # fmt: skip
    base.update(kw)
    return TestResult(**base)


def calibration(minute: int = 0, **kw: Any) -> CalibrationEvent:
    ended = kw.pop("ended_at", T0 + timedelta(minutes=minute))
    base: dict[str, Any] = dict(
        station="L1-S1", line="L1", ended_at=ended, received_at=ended + timedelta(seconds=1),
        program="HX-210", master_loss_pa=10.0, standard_loss_pa=58.0, standard_sccm=2.0,
        standard_ref_pressure_pa=300_000.0, ratio=5.8, sensitivity=2.0 / 48.0, passed=True,
        raw="CAL ...", profile="lf-delim@1",
    )  # fmt: skip
    base.update(kw)
    return CalibrationEvent(**base)


def status(minute: int = 0, state: str = "online", **kw: Any) -> StationStatus:
    base: dict[str, Any] = dict(station="L1-S1", at=T0 + timedelta(minutes=minute), state=state)
    base.update(kw)
    return StationStatus(**base)


def rejected(n: int = 1, **kw: Any) -> Rejected:
    base: dict[str, Any] = dict(
        station="L1-S1", profile="lf-delim@1", raw="#?!garbage", reason="expected 12 fields, got 1",
        received_at=T0 + timedelta(seconds=n), line_no=n,
    )  # fmt: skip
    base.update(kw)
    return Rejected(**base)
