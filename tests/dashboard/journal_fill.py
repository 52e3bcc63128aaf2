"""Fill a journal with a stretch of the demo plant's history, straight from the simulator's
station models (the same physics the live simulator serves), written through the journal API."""

from __future__ import annotations

from dataclasses import replace
from datetime import UTC, datetime, timedelta
from pathlib import Path

from gateway.records import CalibrationEvent, Rejected, StationState, StationStatus, TestResult
from gateway.store import open_journal
from sim.scenario import load_scenario
from sim.station import SimCalibration, SimResult, StationModel

_PROFILES = {"lf-delim": "lf-delim@1", "lf-kv": "lf-kv@1", "lf-mbtcp": "lf-mbtcp@1",
             "lf-mbrtu": "lf-mbrtu@1"}  # fmt: skip


#: stations that send only what a bare station sends: verdict, loss and leak (no limits, no
#: times, no test pressure), with no clock of their own, and no judgement of calibrations
SPARSE_STATIONS = ("L2-S1", "L2-S2", "L2-S3")


def _sparse_result(r: SimResult, profile: str) -> TestResult:
    measured = r.verdict in ("pass", "reject")
    return TestResult(
        station=r.station, line=r.line, cycle=r.cycle, ended_at=r.ended_at,
        received_at=r.ended_at, program=r.program, verdict=r.verdict,
        pressure_loss_pa=r.pressure_loss_pa if measured else None,
        leak_rate_sccm=r.leak_rate_sccm if measured else None, part_id=r.part_id,
        reason=r.reason, raw=f"sim {r.station} {r.cycle}", profile=profile,
        time_source="gateway",
    )  # fmt: skip


def _sparse_calibration(c: SimCalibration, profile: str) -> CalibrationEvent:
    return CalibrationEvent(
        station=c.station, line=c.line, ended_at=c.ended_at, received_at=c.ended_at,
        program=c.program, master_loss_pa=c.master_loss_pa, standard_loss_pa=c.standard_loss_pa,
        raw=f"sim cal {c.station} {c.counter}", profile=profile, time_source="gateway",
    )  # fmt: skip


def _result(r: SimResult, profile: str) -> TestResult:
    return TestResult(
        station=r.station, line=r.line, cycle=r.cycle, ended_at=r.station_time,
        received_at=r.ended_at, program=r.program, verdict=r.verdict,
        test_pressure_pa=r.test_pressure_pa, pressure_loss_pa=r.pressure_loss_pa,
        leak_rate_sccm=r.leak_rate_sccm, reject_limit_sccm=r.reject_limit_sccm,
        fill_s=r.fill_s, stabilise_s=r.stabilise_s, test_s=r.test_s, part_id=r.part_id,
        reason=r.reason, lower_limit_sccm=r.lower_limit_sccm, temperature_c=r.temperature_c,
        raw=f"sim {r.station} {r.cycle}", profile=profile,
    )  # fmt: skip


def _calibration(c: SimCalibration, profile: str) -> CalibrationEvent:
    return CalibrationEvent(
        station=c.station, line=c.line, ended_at=c.station_time, received_at=c.ended_at,
        program=c.program, master_loss_pa=c.master_loss_pa, standard_loss_pa=c.standard_loss_pa,
        standard_sccm=c.standard_sccm, standard_ref_pressure_pa=c.standard_ref_pressure_pa,
        ratio=c.ratio, sensitivity=c.sensitivity, passed=c.passed, reason=c.reason,
        raw=f"sim cal {c.station} {c.counter}", profile=profile,
    )  # fmt: skip


def fill_demo(
    path: Path,
    *,
    hours: float = 8.0,
    end: datetime | None = None,
    stations: tuple[str, ...] | None = None,
    calibrations: bool = True,
    sparse: bool = False,
) -> dict[str, int]:
    """Write ``hours`` of demo-plant history ending at ``end`` (default now) into ``path``.

    ``sparse``: the ``SPARSE_STATIONS`` report as bare stations do (see there), and gross or
    aborted tests of every station carry no loss and no leak rate.
    """
    end = end or datetime.now(UTC).replace(microsecond=0)
    start = end - timedelta(hours=hours)
    scenario = load_scenario("demo")
    journal = open_journal(f"sqlite:///{path}")
    counts = {"results": 0, "calibrations": 0}
    try:
        for st in scenario.stations:
            if stations is not None and st.name not in stations:
                continue
            model = StationModel(scenario, st, start)
            profile = _PROFILES.get(st.type, st.type)
            batch: list[object] = [StationStatus(st.name, start, StationState.ONLINE, "start")]
            while True:
                act = model.next_activity()
                rec = act.record
                if rec.ended_at >= end:
                    break
                bare = sparse and st.name in SPARSE_STATIONS
                if isinstance(rec, SimResult):
                    if bare:
                        batch.append(_sparse_result(rec, profile))
                    else:
                        result = _result(rec, profile)
                        if sparse and rec.verdict in ("gross", "aborted"):
                            result = replace(result, pressure_loss_pa=None, leak_rate_sccm=None)
                        batch.append(result)
                    counts["results"] += 1
                elif calibrations:
                    make = _sparse_calibration if bare else _calibration
                    batch.append(make(rec, profile))
                    counts["calibrations"] += 1
            batch.append(
                Rejected(st.name, profile, "#?garbage*", "no field separator", end, line_no=7)
            )
            journal.write(batch)  # type: ignore[arg-type]
    finally:
        journal.close()
    return counts
