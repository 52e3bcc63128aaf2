"""The plant's program sheet in the gateway config: values a station does not send.

Two places, both optional::

    [parameters."HX-210"]                 # plant-wide, for every station running HX-210
    [parameters."*"]                      # plant-wide defaults for every program (optional)
    reject_limit = "2 sccm"
    lower_limit = "-1 sccm"
    fill = "3 s"; stabilise = "8 s"; test = "10 s"
    test_pressure = "350 kPa"
    part_family = "housings"
    standard = "3 sccm"                   # the leak standard, for calibrations
    standard_reference_pressure = "350 kPa"

    [[stations]]
    ...
    parameters = { "*" = { test = "12 s" }, "HX-230" = { reject_limit = "2.5 sccm" } }

For a record of program P at station S the gateway takes, key by key, S's own entry for P,
then the plant-wide entry for P, then S's ``"*"`` entry, then the plant's ``"*"`` entry. A
value the station sends always wins, and every value taken from here is named in the record's
``supplied`` pairs as coming from the config. Pure: no I/O.
"""

from __future__ import annotations

from collections.abc import Callable, Mapping
from typing import Any

from gateway.errors import ConfigError, UnitError
from gateway.programs import STATION_DEFAULTS, ProgramParams
from gateway.units import parse_quantity

__all__ = ["PARAMETER_KEYS", "parse_parameters", "station_parameters"]

#: config key → (ProgramParams field, kind of quantity or "text", default unit)
PARAMETER_KEYS: dict[str, tuple[str, str, str | None]] = {
    "reject_limit": ("reject_limit_sccm", "leak", None),
    "lower_limit": ("lower_limit_sccm", "leak", None),
    "fill": ("fill_s", "time", "s"),
    "stabilise": ("stabilise_s", "time", "s"),
    "test": ("test_s", "time", "s"),
    "test_pressure": ("test_pressure_pa", "pressure", None),
    "part_family": ("part_family", "text", None),
    "standard": ("standard_sccm", "leak", None),
    "standard_reference_pressure": ("standard_ref_pressure_pa", "pressure", None),
}


def _one(raw: Any, where: str, fail: Callable[[str, str, object], ConfigError]) -> ProgramParams:
    if not isinstance(raw, Mapping):
        raise fail(where, "a table of program parameters", raw)
    values: dict[str, Any] = {}
    for key, value in raw.items():
        spec = PARAMETER_KEYS.get(key)
        if spec is None:
            raise fail(f"{where}.{key}",
                       f"one of the keys {', '.join(PARAMETER_KEYS)} (unknown key)", ...)
        name, kind, default_unit = spec
        if kind == "text":
            if not isinstance(value, str) or not value.strip() or not value.isprintable():
                raise fail(f"{where}.{key}", "a non-empty line of text", value)
            values[name] = value.strip()
            continue
        if isinstance(value, bool) or not isinstance(value, (str, int, float)):
            raise fail(f"{where}.{key}", f"a {kind} with its unit, e.g. {_EXAMPLE[kind]!r}", value)
        text = str(value)
        try:
            q = parse_quantity(text, kind, default_unit=default_unit)  # type: ignore[arg-type]
        except UnitError as exc:
            raise fail(f"{where}.{key}", f"a {kind} with its unit ({exc})", value) from None
        if kind in ("time", "pressure") and q.canonical < 0:
            raise fail(f"{where}.{key}", f"a {kind} that is not negative", value)
        values[name] = q.canonical
    params = ProgramParams(**values)
    if (params.lower_limit_sccm is not None and params.reject_limit_sccm is not None
            and params.lower_limit_sccm >= params.reject_limit_sccm):
        raise fail(f"{where}.lower_limit", "a lower limit below the reject limit",
                   raw.get("lower_limit"))
    return params


_EXAMPLE = {"leak": "2 sccm", "time": "8 s", "pressure": "350 kPa"}


def parse_parameters(
    raw: Any, where: str, fail: Callable[[str, str, object], ConfigError]
) -> dict[str, ProgramParams]:
    """A ``{program name: parameters}`` table (``"*"`` allowed only where the caller says)."""
    if not isinstance(raw, Mapping):
        raise fail(where, "a table {program name = {reject_limit = ..., ...}}", raw)
    out: dict[str, ProgramParams] = {}
    for program, table in raw.items():
        if not isinstance(program, str) or not program.strip():
            raise fail(where, "program names as keys", program)
        out[program] = _one(table, f'{where}."{program}"', fail)
    return out


def station_parameters(
    plant: Mapping[str, ProgramParams], own: Mapping[str, ProgramParams]
) -> dict[str, ProgramParams]:
    """One station's table for ``gateway.programs.complete``: its own entry over the plant's,
    per program; ``"*"`` entries (the station's over the plant's) are the defaults under both."""
    table: dict[str, ProgramParams] = {}
    for program in set(plant) | set(own):
        if program == STATION_DEFAULTS:
            continue
        mine, sheet = own.get(program), plant.get(program)
        if mine is not None and sheet is not None:
            table[program] = mine.merged_over(sheet)
        else:
            chosen = mine if mine is not None else sheet
            assert chosen is not None
            table[program] = chosen
    mine, sheet = own.get(STATION_DEFAULTS), plant.get(STATION_DEFAULTS)
    if mine is not None or sheet is not None:
        table[STATION_DEFAULTS] = (
            mine.merged_over(sheet) if mine is not None and sheet is not None
            else mine or sheet  # type: ignore[assignment]
        )
    return table
