"""Canonical records → DataFrames with the canonical column names (what the store returns)."""

from __future__ import annotations

import json
from collections.abc import Iterable

import pandas as pd

from gateway.records import CalibrationEvent, TestResult

__all__ = ["calibrations_frame", "results_frame"]

_RESULT_COLUMNS = [
    "station",
    "line",
    "cycle",
    "ended_at",
    "received_at",
    "program",
    "verdict",
    "test_pressure_pa",
    "pressure_loss_pa",
    "leak_rate_sccm",
    "reject_limit_sccm",
    "fill_s",
    "stabilise_s",
    "test_s",
    "part_id",
    "reason",
    "lower_limit_sccm",
    "temperature_c",
    "calibration_ref",
    "raw",
    "profile",
    "part_family",
    "time_source",
    "supplied",
]
_CALIBRATION_COLUMNS = [
    "station",
    "line",
    "ended_at",
    "received_at",
    "program",
    "master_loss_pa",
    "standard_loss_pa",
    "standard_sccm",
    "standard_ref_pressure_pa",
    "ratio",
    "sensitivity",
    "passed",
    "reason",
    "raw",
    "profile",
    "time_source",
    "supplied",
]


def _frame(rows: list[dict[str, object]], columns: list[str]) -> pd.DataFrame:
    for row in rows:  # the stores' form: JSON text of the values not sent, None when none
        pairs = row.get("supplied")
        row["supplied"] = (
            json.dumps(dict(pairs), separators=(",", ":"))  # type: ignore[call-overload]
            if pairs
            else None
        )
    df = pd.DataFrame.from_records(rows, columns=columns)
    for col in ("ended_at", "received_at"):
        df[col] = pd.to_datetime(df[col], utc=True)
    if "passed" in df.columns:  # nullable, as the stores give it
        df["passed"] = df["passed"].astype("boolean")
    return df


def results_frame(results: Iterable[TestResult]) -> pd.DataFrame:
    """Test results as a DataFrame (verdict as its string value)."""
    rows = [{c: getattr(r, c) for c in _RESULT_COLUMNS} for r in results]
    for row in rows:
        row["verdict"] = str(row["verdict"])
    return _frame(rows, _RESULT_COLUMNS)


def calibrations_frame(events: Iterable[CalibrationEvent]) -> pd.DataFrame:
    """Calibration events as a DataFrame."""
    rows = [{c: getattr(e, c) for c in _CALIBRATION_COLUMNS} for e in events]
    return _frame(rows, _CALIBRATION_COLUMNS)
