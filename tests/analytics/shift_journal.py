"""A hand-built journal around the night shift of 14 January 2026 (Europe/Berlin, CET = UTC+1).

Shifts: early 06–14, late 14–22, night 22–06 local. The night shift of the 14th runs
2026-01-14T21:00Z – 2026-01-15T05:00Z. Line L1 (stations L1-S1, L1-S2), line L2 (L2-S1, which
only tests in the late shift). Reject limit 2 sccm, guard band 10 % → marginal in (1.8, 2].

Local time, part, station, verdict (reason):
  late   20:00  P7  S1 pass
  late   21:50  P1  S1 reject (leak above limit)      ─┐ a part on two stations, retested
  night  22:10  P1  S2 pass 1.9 sccm (marginal)       ─┘ across the late/night boundary
  night  23:30  P3  S1 pass
  night  23:40  P4  S2 reject; 23:45 reject; passes only at 06:00 (early shift of the 15th)
  night  23:55  P2  S1 reject; 00:05 gross; 00:20 pass ─ retest across midnight, 2 rejects
  night  01:00  P5  S2 pass
  night  02:00  --  S1 reject (no part seated) ┐ no part id: two single-test parts
  night  02:10  --  S1 pass                    ┘
  night  03:00  P6  S1 aborted; 03:05 pass (an aborted test is not a verdict)
  late   15:00  P8  L2-S1 pass

Calibrations: L1-S1 at 00:00 local on the 15th with standard LS-101, due 14 Jan → overdue
from the 15th (local date); L1-S2 passed at 06:00 on the 14th and failed at 03:00 local in the
night. Statuses: L1-S1 online on the 13th; L1-S2 fault 03:30–04:00 local.
"""

from __future__ import annotations

from datetime import UTC, date, datetime, timedelta, timezone
from pathlib import Path

from gateway.records import CalibrationEvent, StationStatus, TestResult

__all__ = ["EXPECTED_NIGHT_L1", "STANDARDS_CSV", "write_journal"]

STANDARDS_CSV = (
    "serial,station,nominal_sccm,reference_pressure_pa,certificate_date,due_date,"
    "interval_months,uncertainty_pct\n"
    "LS-101,L1-S1,5,50000,2025-01-14,2026-01-14,,2\n"
    # 28 Feb 2025 + 11 months = 28 Jan 2026: 13 days after the night shift's end date
    "LS-102,L1-S2,5,50000,2025-02-28,,11,2\n"
    "LS-201,L2-S1,5,50000,2025-06-01,2026-06-01,,2\n"
    "LS-900,OLD-S9,5,50000,2024-01-01,2025-01-01,,\n"
)

_REASONS = {"pass": "", "reject": "leak above limit", "gross": "gross leak", "aborted": "aborted"}


def _local(day: int, hh: int, mm: int) -> datetime:
    """Berlin wall clock in January (CET, UTC+1: EU summer time starts in March) to UTC."""
    return datetime(2026, 1, day, hh, mm, tzinfo=timezone(timedelta(hours=1))).astimezone(UTC)


def _result(
    at: datetime, station: str, part: str | None, verdict: str, leak: float, cycle: int,
    reason: str | None = None,
) -> TestResult:  # fmt: skip
    line = station.split("-")[0]
    return TestResult(
        station=station, line=line, cycle=cycle, ended_at=at, received_at=at, program="HX-210",
        verdict=verdict, test_pressure_pa=50_000.0, pressure_loss_pa=20.0 + 8.0 * leak,
        leak_rate_sccm=leak, reject_limit_sccm=2.0, fill_s=2.0, stabilise_s=3.0, test_s=4.0,
        part_id=part, reason=_REASONS[verdict] if reason is None else reason,
    )  # fmt: skip


def records() -> list[TestResult | CalibrationEvent | StationStatus]:
    rows = [
        (_local(14, 20, 0), "L1-S1", "P7", "pass", 0.3, None),
        (_local(14, 21, 50), "L1-S1", "P1", "reject", 2.4, None),
        (_local(14, 22, 10), "L1-S2", "P1", "pass", 1.9, None),
        (_local(14, 23, 30), "L1-S1", "P3", "pass", 0.1, None),
        (_local(14, 23, 40), "L1-S2", "P4", "reject", 2.5, None),
        (_local(14, 23, 45), "L1-S2", "P4", "reject", 2.6, None),
        (_local(14, 23, 55), "L1-S1", "P2", "reject", 2.2, None),
        (_local(15, 0, 5), "L1-S1", "P2", "gross", 30.0, None),
        (_local(15, 0, 20), "L1-S1", "P2", "pass", 0.4, None),
        (_local(15, 1, 0), "L1-S2", "P5", "pass", 0.2, None),
        (_local(15, 2, 0), "L1-S1", None, "reject", 2.3, "no part seated"),
        (_local(15, 2, 10), "L1-S1", None, "pass", 0.2, None),
        (_local(15, 3, 0), "L1-S1", "P6", "aborted", 0.0, None),
        (_local(15, 3, 5), "L1-S1", "P6", "pass", 0.5, None),
        (_local(15, 6, 0), "L1-S2", "P4", "pass", 1.0, None),
        (_local(14, 15, 0), "L2-S1", "P8", "pass", 0.6, None),
    ]
    out: list[TestResult | CalibrationEvent | StationStatus] = [
        _result(at, st, part, v, leak, i + 1, reason)
        for i, (at, st, part, v, leak, reason) in enumerate(rows)
    ]

    def cal(at: datetime, station: str, passed: bool, standard_loss: float) -> CalibrationEvent:
        master = 20.0
        return CalibrationEvent(
            station=station, line="L1", ended_at=at, received_at=at, program="HX-210",
            master_loss_pa=master, standard_loss_pa=standard_loss, standard_sccm=5.0,
            standard_ref_pressure_pa=50_000.0, ratio=standard_loss / master,
            sensitivity=5.0 / (standard_loss - master), passed=passed,
            reason="" if passed else "ratio below minimum",
        )  # fmt: skip

    out += [
        cal(_local(14, 6, 0), "L1-S1", True, 60.0),
        cal(_local(15, 0, 0), "L1-S1", True, 61.0),
        cal(_local(14, 6, 0), "L1-S2", True, 60.0),
        cal(_local(15, 3, 0), "L1-S2", False, 30.0),
        StationStatus("L1-S1", datetime(2026, 1, 13, 8, 0, tzinfo=UTC), "online"),
        StationStatus("L1-S2", _local(15, 3, 30), "fault", "pressure sensor fault"),
        StationStatus("L1-S2", _local(15, 4, 0), "online"),
    ]
    return out


def write_journal(directory: Path) -> str:
    """Write the journal through the store's own writer; returns its URL."""
    from gateway.store import open_journal

    url = f"sqlite:///{directory / 'journal.db'}"
    journal = open_journal(url)
    try:
        journal.write(records())
    finally:
        journal.close()
    (directory / "standards.csv").write_text(STANDARDS_CSV)
    return url


NIGHT = date(2026, 1, 14)

# Counted by hand from the table in the module docstring (night shift, line L1).
EXPECTED_NIGHT_L1 = {
    # every test ending in [21:00Z, 05:00Z): 12, one aborted, two without a part id
    "tests": 12,
    "aborted": 1,
    "tests_without_part_id": 2,
    # parts first tested in the shift: P2 P3 P4 P5 P6 + two id-less tests (P1 is a late part)
    "parts": 7,
    "first_pass": 4,  # P3 P5 P6, the id-less pass
    "final_pass": 5,  # + P2; P4 and the id-less reject still rejected at 06:00
    "first_pass_yield": 4 / 7,
    "final_yield": 5 / 7,
    "basis": "mixed",
}
