"""Reading a profile's field tables: one raw field (or registers) to one canonical field.

The loader's helpers for every key of a field entry (units, codes, formats, number
dialects, joined timestamps, constants, bits) and ``_Reader``, the typed access that names
file, key and what was expected in every error.
"""

from __future__ import annotations

import math
import re
from collections.abc import Mapping, Sequence
from datetime import datetime
from typing import Any, NoReturn
from zoneinfo import ZoneInfo, ZoneInfoNotFoundError

from gateway.errors import ConfigError, DecodeError, UnitError
from gateway.profiles.model import (
    CAL_FIELDS,
    RESULT_FIELDS,
    Condition,
    FieldSpec,
    NumberText,
    RegisterField,
    ValueKind,
)
from gateway.profiles.registers import NUMERIC_TYPES, parse_type
from gateway.records import Verdict
from gateway.units import normalise_unit, parse_quantity

__all__ = ["REGISTER_TIMES"]

MAX_READ = 125  # Modbus spec: at most 125 registers per read
_MISSING: Any = object()
_QUANTITY = {"pressure", "leak", "time", "temperature"}


def _describe(value: object) -> str:
    names = {bool: "a boolean", int: "an integer", float: "a number", str: "a string",
             list: "an array", dict: "a table"}
    return f"{names.get(type(value), type(value).__name__)} {value!r}"[:80]


class _Reader:
    """Typed access to one profile's TOML with key paths in every error."""

    def __init__(self, file: str) -> None:
        self.file = file

    def fail(self, path: str, expected: str, got: object = _MISSING) -> NoReturn:
        tail = "" if got is _MISSING else f", got {_describe(got)}"
        raise ConfigError(f"{self.file}: {path}: expected {expected}{tail}")

    def table(self, data: Mapping[str, Any], path: str, allowed: Sequence[str]) -> None:
        for key in data:
            if key not in allowed:
                where = f"{path}.{key}" if path else key
                self.fail(where, f"one of the keys {', '.join(allowed)} (unknown key)")

    def get(self, data: Mapping[str, Any], key: str, path: str, types: tuple[type, ...],
            expected: str, default: Any = _MISSING) -> Any:
        where = f"{path}.{key}" if path else key
        if key not in data:
            if default is _MISSING:
                self.fail(where, f"{expected} (missing)")
            return default
        value = data[key]
        if isinstance(value, bool) and bool not in types:
            self.fail(where, expected, value)
        if not isinstance(value, types):
            self.fail(where, expected, value)
        return value

    def string(self, data: Mapping[str, Any], key: str, path: str, default: Any = _MISSING,
               choices: Sequence[str] | None = None, nonempty: bool = True) -> Any:
        expected = "one of " + ", ".join(map(repr, choices)) if choices else "a string"
        value = self.get(data, key, path, (str,), expected, default)
        if value is default and default is not _MISSING:
            return value
        if choices and value not in choices:
            self.fail(f"{path}.{key}", expected, value)
        if nonempty and value == "":
            self.fail(f"{path}.{key}", "a non-empty string", value)
        return value

    def integer(self, data: Mapping[str, Any], key: str, path: str, default: Any = _MISSING,
                lo: int | None = None, hi: int | None = None) -> Any:
        rng = "an integer" + (f" {lo}..{hi}" if lo is not None and hi is not None
                              else f" >= {lo}" if lo is not None else "")
        value = self.get(data, key, path, (int,), rng, default)
        if value is default and default is not _MISSING:
            return value
        if (lo is not None and value < lo) or (hi is not None and value > hi):
            self.fail(f"{path}.{key}", rng, value)
        return value

    def number(self, data: Mapping[str, Any], key: str, path: str, default: Any = _MISSING,
               positive: bool = False) -> Any:
        expected = "a positive number" if positive else "a number"
        value = self.get(data, key, path, (int, float), expected, default)
        if value is default and default is not _MISSING:
            return value
        if not math.isfinite(value) or (positive and value <= 0):
            self.fail(f"{path}.{key}", expected, value)
        return float(value)

    def boolean(self, data: Mapping[str, Any], key: str, path: str, default: Any = _MISSING
                ) -> Any:
        return self.get(data, key, path, (bool,), "true or false", default)

    def sub(self, data: Mapping[str, Any], key: str, path: str, required: bool = True) -> Any:
        where = f"{path}.{key}" if path else key
        if key not in data:
            if required:
                self.fail(where, "a table (missing section)")
            return None
        value = data[key]
        if not isinstance(value, dict):
            self.fail(where, "a table", value)
        return value


_FIELD_KEYS_TEXT = ("from", "unit", "unit_from", "scale", "offset", "empty", "codes", "format",
                    "timezone", "programs", "decimal", "thousands", "sign", "absent", "value")
_NUMBER_KEYS = ("decimal", "thousands", "sign", "absent")
_FIELD_KEYS_REG = ("at", "type", "word_order", "byte_order", "null", "unit", "scale", "offset",
                   "empty", "codes", "format", "timezone", "bit", "mask", "bits")
#: timestamps built from several uint16 registers: (format, registers)
REGISTER_TIMES = {"ymdhms": 6, "bcd-ymdhms": 4}


def _codes(r: _Reader, value: Any, path: str, kind: ValueKind, registers: bool
           ) -> dict[str, str | bool]:
    if not isinstance(value, dict) or not value:
        r.fail(path, "a non-empty table of station code = canonical value", value)
    out: dict[str, str | bool] = {}
    verdicts = [v.value for v in Verdict]
    for code, target in value.items():
        where = f"{path}.{code}"
        if registers:
            try:
                key = str(int(code, 0))
            except ValueError:
                r.fail(where, "an integer register code (e.g. 1 or 0x04) as the key", code)
        else:
            key = code
        if kind == "verdict":
            if target not in verdicts:
                r.fail(where, "one of " + ", ".join(verdicts), target)
        elif not isinstance(target, bool):
            r.fail(where, "true or false", target)
        out[key] = target
    return out


def _time_format(r: _Reader, fmt: str, path: str) -> None:
    if fmt in ("iso", "unix"):
        return
    if "%" not in fmt:
        r.fail(path, '"iso", "unix" or a strftime pattern such as "%Y-%m-%d %H:%M:%S"', fmt)
    sample = datetime(2026, 12, 2, 7, 15, 9)
    try:
        text = sample.strftime(fmt)
        back = datetime.strptime(text, fmt)
    except ValueError as exc:
        r.fail(path, f"a strftime pattern that reads back what it writes ({exc})", fmt)
    if back.date() == datetime(1900, 1, 1).date():
        r.fail(path, "a pattern with a date (%Y, %m, %d ...), not only a time of day", fmt)


def _zone(r: _Reader, name: str, path: str) -> str:
    if name == "station":
        return name
    try:
        ZoneInfo(name)
    except (ZoneInfoNotFoundError, ValueError):
        r.fail(path, 'an IANA time zone such as "Europe/Berlin", or "station"', name)
    return name


def _field(
    r: _Reader,
    canonical: str,
    raw: Any,
    path: str,
    kind: ValueKind,
    required: bool,
    *,
    registers: bool,
    word_order: str = "big",
    byte_order: str = "big",
    raw_names: Sequence[str] | None = None,
    numbers: NumberText | None = None,
) -> FieldSpec:
    if isinstance(raw, str) and not registers:
        raw = {"from": raw}
    if not registers and isinstance(raw, dict) and "value" in raw:
        return _constant(r, canonical, raw, path, kind, required)
    if not isinstance(raw, dict):
        r.fail(path, "an inline table such as { from = \"...\", unit = \"...\" }", raw)
    r.table(raw, path, _FIELD_KEYS_REG if registers else _FIELD_KEYS_TEXT)
    source = None
    register = None
    if registers:
        at = r.integer(raw, "at", path, lo=0, hi=MAX_READ - 1)
        type_name = r.string(raw, "type", path)
        try:
            _, width = parse_type(type_name)
        except DecodeError:
            r.fail(f"{path}.type", f"one of {', '.join(NUMERIC_TYPES)} or string(n)", type_name)
        wo = r.string(raw, "word_order", path, word_order, ("big", "little"))
        bo = r.string(raw, "byte_order", path, byte_order, ("big", "little"))
        null: float | int | None = None
        if "null" in raw:
            value = raw["null"]
            if value == "nan" and type_name == "float32":
                null = math.nan
            elif (isinstance(value, int) and not isinstance(value, bool)
                  and type_name in ("int16", "uint16", "int32", "uint32")):
                null = value
            else:
                r.fail(f"{path}.null", '"nan" (float32) or an integer sentinel (integer types)',
                       value)
        bit = r.integer(raw, "bit", path, None, lo=0, hi=31)
        mask = r.integer(raw, "mask", path, None, lo=1, hi=2**32 - 1)
        if (bit is not None or mask is not None) and type_name not in (
                "uint16", "uint32", "int16", "int32"):
            r.fail(f"{path}.bit", "an integer register type for bit and mask", type_name)
        if bit is not None and mask is not None:
            r.fail(f"{path}.mask", "either bit or mask, not both", mask)
        fmt = raw.get("format")
        if kind == "timestamp" and fmt in REGISTER_TIMES:
            if type_name != "uint16":
                r.fail(f"{path}.type", f'"uint16" for format "{fmt}"', type_name)
            width = REGISTER_TIMES[fmt]
        register = RegisterField(at, type_name, width, wo, bo, null, bit, mask)
        if type_name.startswith("string") and kind not in ("text", "program"):
            r.fail(f"{path}.type", f"a numeric type for a {kind} field", type_name)
    else:
        if isinstance(raw.get("from"), list):
            join = _join(r, raw["from"], f"{path}.from", kind, raw_names)
            source = "+".join(join)
        else:
            source = r.string(raw, "from", path, canonical)
            if raw_names is not None and source not in raw_names:
                r.fail(f"{path}.from", "one of the raw fields " + ", ".join(raw_names), source)
    unit = None
    unit_from = None
    if ("unit" in raw or "unit_from" in raw) and kind not in _QUANTITY:
        r.fail(f"{path}.unit", f"no unit for a {kind} field (remove the key)", raw.get("unit"))
    if "unit" in raw and "unit_from" in raw:
        r.fail(f"{path}.unit", "either unit or unit_from, not both", raw["unit"])
    if "unit" in raw:
        unit_text = r.string(raw, "unit", path)
        try:
            unit = normalise_unit(unit_text, kind)  # type: ignore[arg-type]
        except UnitError as exc:
            r.fail(f"{path}.unit", f"a {kind} unit ({exc})", unit_text)
    if "unit_from" in raw:
        unit_from = r.string(raw, "unit_from", path)
        if raw_names is not None and unit_from not in raw_names:
            r.fail(f"{path}.unit_from", "one of the raw fields " + ", ".join(raw_names),
                   unit_from)
    if kind in ("pressure", "leak") and unit is None and unit_from is None:
        r.fail(f"{path}.unit", f"a {kind} unit, or unit_from naming the field that holds it "
               "(missing)")
    numeric = kind in _QUANTITY or kind == "number" or (registers and kind == "timestamp")
    if ("scale" in raw or "offset" in raw) and not numeric:
        r.fail(f"{path}.scale", f"no scale/offset for a {kind} field (remove the key)",
               raw.get("scale", raw.get("offset")))
    scale = r.number(raw, "scale", path, 1.0)
    offset = r.number(raw, "offset", path, 0.0)
    # a station's clock that sends nothing is a fault, not "no clock" (that is: no mapping)
    strict = required or canonical == "ended_at"
    empty = r.string(raw, "empty", path, "none" if not strict else "error",
                     ("none", "error"))
    if required and empty == "none":
        r.fail(f"{path}.empty", f'"error": {canonical} is required and cannot be empty', empty)
    codes = None
    bit_codes: tuple[tuple[int, Any], ...] = ()
    if registers and "bits" in raw:
        bit_codes = _bit_codes(r, raw, path, kind)
    elif kind in ("verdict", "bool"):
        if "codes" not in raw:
            r.fail(f"{path}.codes", "a table of station code = "
                   + ("verdict" if kind == "verdict" else "true/false") + " (missing)")
        codes = _codes(r, raw["codes"], f"{path}.codes", kind, registers)
    elif "codes" in raw:
        r.fail(f"{path}.codes", f"no codes for a {kind} field (remove the key)", raw["codes"])
    time_format = None
    timezone = None
    if kind == "timestamp":
        time_format = r.string(raw, "format", path, "unix" if registers else "iso")
        if registers:
            if time_format != "unix" and time_format not in REGISTER_TIMES:
                r.fail(f"{path}.format", '"unix", "ymdhms" (six registers: year, month, day, '
                       'hour, minute, second) or "bcd-ymdhms" (four packed-BCD registers)',
                       time_format)
        else:
            _time_format(r, time_format, f"{path}.format")
        tz = _zone(r, r.string(raw, "timezone", path, "station"), f"{path}.timezone")
        timezone = None if tz == "station" else tz
    else:
        for key in ("format", "timezone"):
            if key in raw:
                r.fail(f"{path}.{key}", f"no {key} for a {kind} field (remove the key)", raw[key])
    program_lookup = False
    if "programs" in raw:
        if kind != "program":
            r.fail(f"{path}.programs", "only on the program field", raw["programs"])
        program_lookup = r.boolean(raw, "programs", path)
    number = None if registers else _number_text(r, raw, path, kind, numbers)
    return FieldSpec(
        canonical=canonical, kind=kind, source=source, register=register, unit=unit,
        unit_from=unit_from, scale=scale, offset=offset, empty_none=empty == "none",
        codes=codes, time_format=time_format, timezone=timezone,
        program_lookup=program_lookup or registers, number=number, bit_codes=bit_codes,
        join=tuple(source.split("+")) if source is not None and "+" in source
        and isinstance(raw.get("from"), list) else (),
    )


def _bit_codes(r: _Reader, raw: Mapping[str, Any], path: str, kind: ValueKind
               ) -> tuple[tuple[int, Any], ...]:
    """``bits = { aborted = 4, gross = 3, reject = 2, pass = 1 }``: the first listed value
    whose bit is set wins, so unrelated flag bits never need listing."""
    if kind not in ("verdict", "bool"):
        r.fail(f"{path}.bits", "only on a verdict or passed field", raw["bits"])
    if "codes" in raw:
        r.fail(f"{path}.codes", "either codes or bits, not both", raw["codes"])
    table = raw["bits"]
    if not isinstance(table, dict) or not table:
        r.fail(f"{path}.bits", "a table of value = bit number, in priority order", table)
    out: list[tuple[int, Any]] = []
    for name, bit in table.items():
        if isinstance(bit, bool) or not isinstance(bit, int) or not 0 <= bit <= 31:
            r.fail(f"{path}.bits.{name}", "a bit number 0..31", bit)
        if kind == "verdict":
            if name not in {v.value for v in Verdict}:
                r.fail(f"{path}.bits.{name}", "a verdict: pass, reject, gross, aborted", name)
            out.append((bit, name))
        else:
            if name not in ("true", "false"):
                r.fail(f"{path}.bits.{name}", "true or false", name)
            out.append((bit, name == "true"))
    return tuple(out)


def _join(r: _Reader, names: list[Any], path: str, kind: ValueKind,
          raw_names: Sequence[str] | None) -> tuple[str, ...]:
    """``from = ["date", "time"]``: raw fields joined with one space (a split timestamp)."""
    if kind not in ("timestamp", "text"):
        r.fail(path, f"one raw field for a {kind} field (several only for a time or text)",
               names)
    if len(names) < 2 or not all(isinstance(n, str) and n and "+" not in n for n in names):
        r.fail(path, "an array of two or more raw field names", names)
    for name in names:
        if raw_names is not None and name not in raw_names:
            r.fail(path, "raw fields among " + ", ".join(raw_names), name)
    return tuple(names)


def _number_text(r: _Reader, raw: Mapping[str, Any], path: str, kind: ValueKind,
                 defaults: NumberText | None) -> NumberText | None:
    """The field's number writing: the dialect's, with this field's overrides."""
    base = defaults or NumberText()
    given = [k for k in _NUMBER_KEYS if k in raw]
    numeric = kind in _QUANTITY or kind in ("number", "int")
    if given and not numeric and given != ["absent"]:
        r.fail(f"{path}.{given[0]}", f"no number format for a {kind} field (remove the key)",
               raw[given[0]])
    decimal = r.string(raw, "decimal", path, base.decimal, (".", ","))
    thousands = r.string(raw, "thousands", path, base.thousands, ("", ".", ",", " ", "'"))
    if thousands and thousands == decimal:
        r.fail(f"{path}.thousands", "a thousands separator other than the decimal mark",
               thousands)
    sign = r.string(raw, "sign", path, "trailing" if base.trailing_sign else "leading",
                    ("leading", "trailing"))
    absent = base.absent
    if "absent" in raw:
        value = raw["absent"]
        if isinstance(value, str):
            value = [value]
        if not isinstance(value, list) or not all(isinstance(v, str) and v for v in value):
            r.fail(f"{path}.absent", 'placeholder text(s) meaning "no value", e.g. "---"',
                   raw["absent"])
        absent = tuple(value)
    spec = NumberText(decimal if numeric else ".", thousands if numeric else "",
                      sign == "trailing" and numeric, absent)
    return None if spec == NumberText() else spec


def _constant(r: _Reader, canonical: str, raw: Mapping[str, Any], path: str,
              kind: ValueKind, required: bool) -> FieldSpec:
    """``value = "2 sccm"``: the profile states a value the station does not send."""
    r.table(raw, path, ("value",))
    value = raw["value"]
    if kind in _QUANTITY:
        text = value if isinstance(value, str) else None
        if text is None and isinstance(value, int | float) and not isinstance(value, bool) \
                and kind in ("time", "temperature"):
            text = f"{value} {'s' if kind == 'time' else 'C'}"
        if text is None:
            r.fail(f"{path}.value", f'a {kind} with its unit, e.g. "2 sccm"', value)
        try:
            constant: Any = parse_quantity(text, kind).canonical  # type: ignore[arg-type]
        except UnitError as exc:
            r.fail(f"{path}.value", f"a {kind} with its unit ({exc})", value)
    elif kind in ("text", "program") and isinstance(value, str) and value:
        constant = value
    else:
        r.fail(f"{path}.value", f"a constant for a {kind} field (times, pressures, leak rates, "
               "temperatures, text, program)", value)
    if required:
        r.fail(f"{path}.value", f"the station's own {canonical} (a required field cannot be a "
               "constant)", value)
    return FieldSpec(canonical=canonical, kind=kind, source=None, empty_none=True,
                     constant=constant)


def _fields(r: _Reader, table: Any, path: str, record: str, *, registers: bool,
            word_order: str = "big", byte_order: str = "big",
            raw_names: Sequence[str] | None = None,
            numbers: NumberText | None = None) -> tuple[FieldSpec, ...]:
    catalogue = dict(RESULT_FIELDS if record == "result" else CAL_FIELDS)
    if registers and record == "result":
        del catalogue["cycle"]  # the slot's head guard is the cycle
    if not isinstance(table, dict):
        r.fail(path, "a table of canonical field = mapping", table)
    for name in table:
        if name not in catalogue:
            r.fail(f"{path}.{name}", "a canonical field: " + ", ".join(catalogue)
                   + " (unknown field)")
    for name, (_, required) in catalogue.items():
        if required and name not in table:
            r.fail(f"{path}.{name}", f"a mapping for the required canonical field {name} "
                   "(missing)")
    return tuple(
        _field(r, name, table[name], f"{path}.{name}", *catalogue[name], registers=registers,
               word_order=word_order, byte_order=byte_order, raw_names=raw_names,
               numbers=numbers)
        for name in table
    )


def _condition(r: _Reader, raw: Any, path: str, names: Sequence[str] | None) -> Condition:
    if not isinstance(raw, dict):
        r.fail(path, 'an inline table { field = "...", equals = "..." } or { fields = N }', raw)
    r.table(raw, path, ("field", "equals", "matches", "fields"))
    count = r.integer(raw, "fields", path, None, lo=1, hi=1000)
    if "field" not in raw:
        if count is None:
            r.fail(f"{path}.field", "a raw field to test, or fields = N (a field count)")
        for key in ("equals", "matches"):
            if key in raw:
                r.fail(f"{path}.field", f"the raw field {key} applies to (missing)")
        return Condition(None, (), count)
    name = r.string(raw, "field", path)
    if names is not None and name not in names:
        r.fail(f"{path}.field", "one of the raw fields " + ", ".join(names), name)
    if ("equals" in raw) == ("matches" in raw):
        r.fail(f"{path}.equals", "exactly one of equals (values) or matches (a regular "
               "expression)")
    if "matches" in raw:
        pattern = r.string(raw, "matches", path)
        try:
            re.compile(pattern)
        except re.error as exc:
            r.fail(f"{path}.matches", f"a valid regular expression ({exc})", pattern)
        return Condition(name, (), count, pattern)
    equals = raw.get("equals", _MISSING)
    if isinstance(equals, str):
        values: tuple[str, ...] = (equals,)
    elif isinstance(equals, list) and equals and all(isinstance(v, str) for v in equals):
        values = tuple(equals)
    else:
        r.fail(f"{path}.equals", "a string or a non-empty array of strings",
               None if equals is _MISSING else equals)
    return Condition(name, values, count)
