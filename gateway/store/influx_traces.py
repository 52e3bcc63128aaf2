"""Pressure curves read back from InfluxDB (``pressure_traces``, one point per curve).

A scale-out plant's dashboard reads the central InfluxDB, not a gateway's journal; the curves
the gateways' sinks wrote there come back as the same ``PressureTrace`` records: samples from
the comma-separated ``pressures_pa`` field (written in the shortest form that reads back to the
same double), phases from the JSON ``phases`` field, times from the point and its fields.
"""

from __future__ import annotations

import json
from datetime import UTC, datetime
from typing import Any

from gateway.records import PressureTrace

__all__ = ["influx_trace_stations", "influx_traces"]

_MEASUREMENT = "pressure_traces"
_FIELDS = ('"cycle", "sample_interval_s", "pressures_pa", "phases", "started_at_ns", '
           '"received_at_ns", "profile", "time_source", "station", "line", "program", "role"')


def _at(ns: Any) -> datetime:
    return datetime.fromtimestamp(int(ns) / 1e9, UTC)


def influx_traces(store: Any, station: str, *, role: str | None = None,
                  limit: int | None = 50) -> list[PressureTrace]:
    """A station's curves, newest first (``store`` an ``InfluxStore``)."""
    q = f'SELECT {_FIELDS} FROM {_MEASUREMENT} WHERE "station" = $station'
    params: dict[str, Any] = {"station": station}
    if role is not None:
        q += ' AND "role" = $role'
        params["role"] = role
    q += " ORDER BY time DESC"
    if limit is not None:
        q += f" LIMIT {int(limit)}"
    out: list[PressureTrace] = []
    for series in store._query(q, params):
        columns = series["columns"]
        for values in series["values"]:
            row = {**series["tags"], **dict(zip(columns, values, strict=True))}
            out.append(PressureTrace(
                station=row["station"], line=row.get("line") or "", cycle=int(row["cycle"]),
                ended_at=_at(row["time"]), received_at=_at(row["received_at_ns"]),
                started_at=_at(row["started_at_ns"]),
                sample_interval_s=float(row["sample_interval_s"]),
                pressures_pa=tuple(float(v) for v in str(row["pressures_pa"]).split(",")),
                phases=tuple((str(n), float(t)) for n, t in json.loads(row["phases"])),
                role=row.get("role") or "result", program=row.get("program") or "default",
                profile=row.get("profile") or "", time_source=row.get("time_source") or "station",
            ))  # fmt: skip
    return out


def influx_trace_stations(store: Any) -> list[str]:
    """Stations with curves in the database."""
    names: set[str] = set()
    for series in store._query(f'SHOW TAG VALUES FROM {_MEASUREMENT} WITH KEY = "station"'):
        names.update(str(v[1]) for v in series["values"])
    return sorted(names)
