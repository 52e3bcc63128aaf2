"""The plant's own program parameters: what a station does not send, from the gateway config.

Many stations send only a verdict and a reading: no reject limit, no fill/stabilise/test
times, no test pressure. The plant knows them (they are on the program sheet), so the gateway
config may give them per station and program; ``complete`` fills a record's absent values from
them and names each filled field in the record's ``supplied`` pairs, so an audit can always
tell the station's values from the plant's. A value the station sends always wins.

Pure: no I/O; the config loader builds the ``ProgramParams`` (canonical units) once.
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass, fields
from typing import Any

__all__ = ["STATION_DEFAULTS", "ProgramParams", "complete"]

#: the key of a station's defaults, which apply to every program the station runs
STATION_DEFAULTS = "*"


@dataclass(frozen=True, slots=True)
class ProgramParams:
    """One program's parameters in canonical units; None where the plant gave none."""

    reject_limit_sccm: float | None = None
    lower_limit_sccm: float | None = None
    fill_s: float | None = None
    stabilise_s: float | None = None
    test_s: float | None = None
    test_pressure_pa: float | None = None
    part_family: str | None = None
    # for calibrations: the leak standard in use, when the station does not report it
    standard_sccm: float | None = None
    standard_ref_pressure_pa: float | None = None

    def merged_over(self, base: ProgramParams) -> ProgramParams:
        """These parameters, with ``base``'s where these have none (program over station)."""
        return ProgramParams(**{
            f.name: getattr(base, f.name) if getattr(self, f.name) is None
            else getattr(self, f.name)
            for f in fields(self)
        })  # fmt: skip

    def items(self) -> list[tuple[str, Any]]:
        return [(f.name, getattr(self, f.name)) for f in fields(self)
                if getattr(self, f.name) is not None]


_RESULT_KEYS = frozenset({
    "reject_limit_sccm", "lower_limit_sccm", "fill_s", "stabilise_s", "test_s",
    "test_pressure_pa", "part_family",
})  # fmt: skip
_CALIBRATION_KEYS = frozenset({"standard_sccm", "standard_ref_pressure_pa"})


def params_for(table: Mapping[str, ProgramParams], program: str | None) -> ProgramParams | None:
    """The parameters for ``program``: its own over the station defaults, or None."""
    base = table.get(STATION_DEFAULTS)
    own = table.get(program) if program is not None else None
    if own is None:
        return base
    return own if base is None else own.merged_over(base)


def complete(
    record: str,
    values: dict[str, Any],
    table: Mapping[str, ProgramParams],
    supplied: dict[str, str],
) -> None:
    """Fill ``values``' absent fields (None or missing) of a ``record`` ("result" or
    "calibration") from ``table`` and note each one as ``supplied[field] = "config"``."""
    if not table:
        return
    params = params_for(table, values.get("program"))
    if params is None:
        return
    keys = _RESULT_KEYS if record == "result" else _CALIBRATION_KEYS
    for name, value in params.items():
        if name in keys and values.get(name) is None:
            values[name] = value
            supplied[name] = "config"
