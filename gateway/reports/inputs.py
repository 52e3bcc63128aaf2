"""Report inputs from files: tidy CSV tables and the leak-standard register."""

from __future__ import annotations

import csv
import math
from datetime import date, datetime
from pathlib import Path
from typing import TYPE_CHECKING, Any

if TYPE_CHECKING:
    import pandas as pd


def csv_header(path: str) -> list[str]:
    """The header names of a CSV file, stripped and lower-case (empty for an empty file)."""
    try:
        with Path(path).open(newline="", encoding="utf-8-sig") as handle:
            header = next(csv.reader(handle), [])
    except OSError as exc:
        raise ValueError(f"{path}: cannot open ({exc.strerror})") from None
    except (csv.Error, UnicodeDecodeError) as exc:
        raise ValueError(f"{path}:1: {exc}") from None
    return [h.strip().lower() for h in header]


def read_tidy_csv(path: str, columns: dict[str, type]) -> pd.DataFrame:
    """Read a CSV with a header; ``columns`` maps required names to float or str.

    Errors name the file, line and column: ``data.csv:7: column 'value': expected a number``.
    """
    import pandas as pd

    file = Path(path)
    try:
        handle = file.open(newline="", encoding="utf-8-sig")
    except OSError as exc:
        raise ValueError(f"{path}: cannot open ({exc.strerror})") from None
    with handle:
        reader = csv.reader(handle)
        try:
            header = next(reader)
        except StopIteration:
            raise ValueError(
                f"{path}: empty file; expected a header with {', '.join(columns)}"
            ) from None
        except csv.Error as exc:
            raise ValueError(f"{path}:1: {exc}") from None
        names = [h.strip().lower() for h in header]
        missing = [c for c in columns if c not in names]
        if missing:
            raise ValueError(
                f"{path}:1: missing column(s) {', '.join(repr(c) for c in missing)} in the header "
                f"(found {', '.join(repr(n) for n in names)})"
            )
        index = {c: names.index(c) for c in columns}
        rows: dict[str, list[Any]] = {c: [] for c in columns}
        try:
            for record in reader:
                line_no = reader.line_num
                if not record or all(not cell.strip() for cell in record):
                    continue
                for col, kind in columns.items():
                    i = index[col]
                    cell = record[i].strip() if i < len(record) else ""
                    if not cell:
                        raise ValueError(f"{path}:{line_no}: column {col!r}: empty value")
                    if kind is float:
                        try:
                            number = float(cell)
                        except ValueError:
                            raise ValueError(
                                f"{path}:{line_no}: column {col!r}: expected a number, got {cell!r}"
                            ) from None
                        if not math.isfinite(number):
                            raise ValueError(
                                f"{path}:{line_no}: column {col!r}: expected a finite "
                                f"number, got {cell!r}"
                            )
                        rows[col].append(number)
                    else:
                        rows[col].append(cell)
        except csv.Error as exc:
            raise ValueError(f"{path}:{reader.line_num}: {exc}") from None
    if not rows[next(iter(columns))]:
        raise ValueError(f"{path}: no data rows after the header")
    return pd.DataFrame(rows)


def read_standards(path: str) -> list[Any]:
    """The leak-standard register from CSV; errors name the line and column."""
    from analytics import LeakStandard

    frame = read_tidy_csv(
        path,
        {
            "serial": str,
            "station": str,
            "nominal_sccm": float,
            "reference_pressure_pa": float,
            "certificate_date": str,
        },
    )
    with Path(path).open(newline="", encoding="utf-8-sig") as handle:
        extra = list(csv.DictReader(handle))
    out = []
    for i, (row, raw) in enumerate(zip(frame.to_dict("records"), extra, strict=True), start=2):
        raw = {k.strip().lower(): (v or "").strip() for k, v in raw.items() if k}

        def day(col: str, text: str, line: int = i) -> date:
            try:
                return date.fromisoformat(text)
            except ValueError:
                raise ValueError(
                    f"{path}:{line}: column {col!r}: expected a date YYYY-MM-DD, got {text!r}"
                ) from None

        due = raw.get("due_date", "")
        months = raw.get("interval_months", "")
        if not due and not months:
            raise ValueError(f"{path}:{i}: give column 'due_date' or 'interval_months'")
        try:
            interval = int(months) if months else None
            uncertainty = float(raw["uncertainty_pct"]) if raw.get("uncertainty_pct") else None
        except ValueError:
            raise ValueError(
                f"{path}:{i}: interval_months must be a whole number and uncertainty_pct a number"
            ) from None
        out.append(
            LeakStandard(
                serial=row["serial"],
                station=row["station"],
                nominal_sccm=row["nominal_sccm"],
                reference_pressure_pa=row["reference_pressure_pa"],
                certificate_date=day("certificate_date", row["certificate_date"]),
                due_date=day("due_date", due) if due else None,
                interval_months=interval,
                uncertainty_pct=uncertainty,
            )
        )
    return out


def config_standard(source: str, i: int, table: Any) -> Any:
    """One [[standards]] table as a LeakStandard; mistakes name the file and key."""
    from analytics import LeakStandard
    from gateway.units import parse_quantity

    serial = table.get("serial")
    where = f"{source}: standards[{serial if isinstance(serial, str) else i}]"
    allowed = ("serial", "station", "nominal", "reference_pressure", "certificate_date",
               "due_date", "interval_months", "uncertainty_pct")  # fmt: skip
    for key in table:
        if key not in allowed:
            raise ValueError(f"{where}.{key}: expected one of {', '.join(allowed)} (unknown key)")

    def text(key: str) -> str:
        value = table.get(key)
        if not isinstance(value, str) or not value.strip():
            raise ValueError(f"{where}.{key}: expected a non-empty string, got {value!r}")
        return value.strip()

    def quantity(key: str, kind: str, unit: str) -> float:
        value = table.get(key)
        if isinstance(value, bool) or not isinstance(value, int | float | str):
            raise ValueError(f"{where}.{key}: expected a value like \"3 {unit}\", got {value!r}")
        try:
            return float(parse_quantity(str(value), kind, default_unit=unit).canonical)  # type: ignore[arg-type]
        except ValueError as exc:
            raise ValueError(f"{where}.{key}: {exc}") from None

    def day(key: str) -> date | None:
        value = table.get(key)
        if value is None:
            return None
        if isinstance(value, date) and not isinstance(value, datetime):
            return value
        try:
            return date.fromisoformat(str(value))
        except ValueError:
            raise ValueError(f"{where}.{key}: expected a date YYYY-MM-DD, got {value!r}") from None

    months = table.get("interval_months")
    if months is not None and (isinstance(months, bool) or not isinstance(months, int)):
        raise ValueError(f"{where}.interval_months: expected a whole number, got {months!r}")
    uncertainty = table.get("uncertainty_pct")
    if uncertainty is not None and (
        isinstance(uncertainty, bool) or not isinstance(uncertainty, int | float)
    ):
        raise ValueError(f"{where}.uncertainty_pct: expected a number, got {uncertainty!r}")
    certificate = day("certificate_date")
    if certificate is None:
        raise ValueError(f"{where}.certificate_date: expected a date YYYY-MM-DD (required)")
    try:
        return LeakStandard(
            serial=text("serial"),
            station=text("station"),
            nominal_sccm=quantity("nominal", "leak", "sccm"),
            reference_pressure_pa=quantity("reference_pressure", "pressure", "Pa"),
            certificate_date=certificate,
            due_date=day("due_date"),
            interval_months=months,
            uncertainty_pct=None if uncertainty is None else float(uncertainty),
        )
    except ValueError as exc:
        raise ValueError(f"{where}: {exc}") from None
