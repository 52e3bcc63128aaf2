"""What the InfluxDB store's modules share: InfluxQL conditions with bound parameters, time
conversions, and the results measurement's name and windows."""

from __future__ import annotations

from datetime import datetime, timedelta
from typing import Any

import pandas as pd

from gateway.influxdb.lineprotocol import MEASUREMENTS, timestamp_ns

__all__ = ["BUCKET_NS", "PART_WINDOW", "RESULTS", "Where", "ns", "utc"]

RESULTS = MEASUREMENTS["result"]
BUCKET_NS = {"hour": 3_600 * 10**9, "day": 86_400 * 10**9}
#: how far before and after a range a part's other tests are looked for (retests come within
#: hours at a station; a part tested again after more than this counts as a new part there)
PART_WINDOW = timedelta(days=2)


def ns(name: str, value: datetime | None) -> int | None:
    if value is None:
        return None
    if not isinstance(value, datetime) or value.utcoffset() is None:
        raise ValueError(f"{name} must be a timezone-aware datetime, got {value!r}")
    return timestamp_ns(value)


def utc(ns: pd.Series) -> pd.Series:
    """ns epochs → tz-aware UTC timestamps at µs resolution (as the SQLite store gives)."""
    return pd.to_datetime(ns.astype("int64") // 1000, unit="us", utc=True)


class Where:
    """``AND``-ed InfluxQL conditions from fixed fragments; values as bound parameters."""

    def __init__(self) -> None:
        self.parts: list[str] = []
        self.params: dict[str, Any] = {}

    def time(self, since: datetime | None, until: datetime | None) -> Where:
        lo, hi = ns("since", since), ns("until", until)
        if lo is not None and hi is not None and hi < lo:
            raise ValueError("until is before since")
        if lo is not None:
            self.parts.append("time >= $since")
            self.params["since"] = lo
        if hi is not None:
            self.parts.append("time < $until")
            self.params["until"] = hi
        return self

    def eq(self, column: str, value: str | None) -> Where:
        if value is not None:
            name = f"p{len(self.params)}"
            self.parts.append(f'"{column}" = ${name}')
            self.params[name] = value
        return self

    def raw(self, fragment: str, **params: Any) -> Where:
        self.parts.append(fragment)
        self.params.update(params)
        return self

    def sql(self) -> str:
        return (" WHERE " + " AND ".join(self.parts)) if self.parts else ""

    def copy(self) -> Where:
        other = Where()
        other.parts, other.params = list(self.parts), dict(self.params)
        return other
