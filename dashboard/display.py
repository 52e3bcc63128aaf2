"""Display units and number formatting (pure). The store is canonical (Pa, sccm); pages convert
only what they show, through gateway.units, so every unit name means what it means there."""

from __future__ import annotations

import math
from dataclasses import dataclass

import pandas as pd

from gateway.units import from_canonical, unit_label

__all__ = ["LABELS", "LEAK_UNITS", "PRESSURE_UNITS", "Units", "cut_note", "fmt", "labelled", "pct",
           "significant"]

PRESSURE_UNITS = ("Pa", "kPa", "mbar", "psi")
LEAK_UNITS = ("sccm", "mbar*L/s", "Pa*m3/s")


def fmt(value: object, digits: int = 3) -> str:
    """Short human number: 3 significant digits, scientific for tiny or huge magnitudes."""
    if value is None or value is pd.NA:
        return "–"
    try:
        x = float(value)  # type: ignore[arg-type]
    except (TypeError, ValueError):
        return str(value)
    if not math.isfinite(x):
        return "–"
    if x != 0 and (abs(x) < 1e-3 or abs(x) >= 1e6):
        return f"{x:.{digits - 1}e}"
    return f"{x:.{digits}g}"


@dataclass(frozen=True)
class Units:
    """The user's display units; ``p``/``q`` convert canonical pressures/leak rates."""

    pressure: str = "Pa"
    leak: str = "sccm"

    @property
    def p_factor(self) -> float:
        return from_canonical(1.0, self.pressure, "pressure")

    @property
    def q_factor(self) -> float:
        return from_canonical(1.0, self.leak, "leak")

    @property
    def p_label(self) -> str:
        return unit_label(self.pressure)

    @property
    def q_label(self) -> str:
        return unit_label(self.leak)

    def p(self, value: float | None) -> float | None:
        return None if value is None or pd.isna(value) else float(value) * self.p_factor

    def q(self, value: float | None) -> float | None:
        return None if value is None or pd.isna(value) else float(value) * self.q_factor

    def frame(self, df: pd.DataFrame) -> pd.DataFrame:
        """A copy with pressure (``*_pa``) and leak (``*_sccm``) columns in display units,
        renamed to say so."""
        out = df.copy()
        renames = {}
        for col in df.columns:
            if col.endswith("_pa"):
                out[col] = pd.to_numeric(df[col], errors="coerce") * self.p_factor
                renames[col] = f"{col[:-3]} [{self.p_label}]"
            elif col.endswith("_sccm"):
                out[col] = pd.to_numeric(df[col], errors="coerce") * self.q_factor
                renames[col] = f"{col[:-5]} [{self.q_label}]"
        return out.rename(columns=renames)


# -- human labels for tables (the field names stay in downloads and the JSON) ----------------
#: field → label; a unit in brackets is added from the kind (pressure, leak, ...) below
LABELS: dict[str, str] = {
    "station": "Station", "line": "Line", "cycle": "Cycle", "program": "Program",
    "verdict": "Verdict", "part_id": "Part", "part_family": "Part family", "reason": "Reason",
    "ended_at": "Ended", "received_at": "Received", "at": "At", "day": "Day",
    "shift": "Shift", "test_pressure_pa": "Test pressure", "pressure_loss_pa": "Pressure loss",
    "leak_rate_sccm": "Leak rate", "reject_limit_sccm": "Reject limit",
    "lower_limit_sccm": "Lower limit", "fill_s": "Fill", "stabilise_s": "Stabilise",
    "test_s": "Test", "temperature_c": "Temperature", "calibration_ref": "Calibration used",
    "raw": "Raw input", "profile": "Profile", "time_source": "Time stamped by",
    "supplied": "Values not sent by the station", "record_id": "Record id",
    "master_loss_pa": "Master loss", "standard_loss_pa": "Standard loss",
    "standard_sccm": "Leak standard", "standard_ref_pressure_pa": "Standard's reference pressure",
    "ratio": "Ratio (standard / master)", "sensitivity": "Sensitivity", "passed": "Passed",
    "state": "State", "detail": "Detail", "line_no": "Line no.", "serial": "Serial",
    "due_date": "Due", "days_left": "Days left", "status": "Status",
    "nominal_sccm": "Nominal", "uncertainty_pct": "Uncertainty", "kind": "Kind",
    "series": "Series", "message": "Message", "passes": "Passes",
    "passed_after_retest": "Passed after a retest", "share": "Share of passes retested",
    "rejects_before": "Rejects before", "calibration_at": "Calibration in force",
    "calibration_program": "Calibration program", "calibration_passed": "Calibration passed",
    "marginal": "Marginal", "passed_tests": "Passed tests", "tests": "Tests",
}
#: fields by what their number is: pressure (Pa), leak rate (sccm), seconds, °C, %, share
_PRESSURE = {"test_pressure_pa", "pressure_loss_pa", "master_loss_pa", "standard_loss_pa",
             "standard_ref_pressure_pa"}
_LEAK = {"leak_rate_sccm", "reject_limit_sccm", "lower_limit_sccm", "standard_sccm",
         "nominal_sccm"}
_SECONDS = {"fill_s", "stabilise_s", "test_s"}
_SHARES = {"share"}
_PERCENT = {"uncertainty_pct"}


def significant(value: object, digits: int = 4) -> object:
    """A float rounded to ``digits`` significant digits (still a number, so tables sort)."""
    if isinstance(value, bool) or not isinstance(value, float) or not math.isfinite(value):
        return value
    return float(f"{value:.{digits}g}")


def pct(value: float | None) -> str:
    """A share as the dashboard prints percentages everywhere: one decimal, "12.3 %"."""
    return "–" if value is None or pd.isna(value) else f"{100 * float(value):.1f} %"


def labelled(df: pd.DataFrame, units: Units, tz: str | None = None) -> pd.DataFrame:
    """A table for people: values in the chosen units, shares in percent, times in ``tz``,
    absent values as "–" (a numeric column with gaps becomes text), and every column named
    in words with its unit ("Leak rate [mbar·L/s]") instead of its field name.
    ``dashboard.tables.show`` prints the numbers to 4 significant digits and percentages to
    one decimal."""
    out = df.copy()
    names: dict[str, str] = {}
    for col in df.columns:
        label = LABELS.get(col, col.replace("_", " ").capitalize())
        values = df[col]
        if col in _PRESSURE:
            values, label = pd.to_numeric(values, errors="coerce") * units.p_factor, (
                f"{label} [{units.p_label}]")
        elif col in _LEAK:
            values, label = pd.to_numeric(values, errors="coerce") * units.q_factor, (
                f"{label} [{units.q_label}]")
        elif col == "sensitivity":
            values = pd.to_numeric(values, errors="coerce") * units.q_factor / units.p_factor
            label = f"{label} [{units.q_label}/{units.p_label}]"
        elif col in _SECONDS:
            label += " [s]"
        elif col == "temperature_c":
            label += " [°C]"
        elif col in _SHARES:
            values, label = pd.to_numeric(values, errors="coerce") * 100, f"{label} [%]"
        elif col in _PERCENT:
            label += " [%]"
        if tz is not None and isinstance(values.dtype, pd.DatetimeTZDtype):
            values = values.dt.tz_convert(tz)
        if pd.api.types.is_numeric_dtype(values) and not pd.api.types.is_bool_dtype(values) \
                and values.isna().any():
            # a grid prints a missing number as "None": such a column goes out as text
            digits = ".1f" if col in _SHARES else ".4g"
            values = values.map(lambda v, d=digits: "–" if pd.isna(v) else format(v, d))
        elif values.dtype == object:
            values = values.map(lambda v: "–" if v is None or v is pd.NA
                                or (isinstance(v, float) and math.isnan(v)) else v)
        out[col] = values
        names[col] = label
    return out.rename(columns=names)


def cut_note(shown: int, total: int | None, what: str = "rows") -> str | None:
    """"Showing the newest 1,000 of 5,210 rows" when a table was cut (None when it was not)."""
    if total is not None and total > shown:
        return f"Showing {shown:,} of {total:,} {what}; {total - shown:,} cut."
    if total is None:
        return (f"Showing the first {shown:,} {what}; there may be more: narrow the range or "
                "raise the row limit.")
    return None
