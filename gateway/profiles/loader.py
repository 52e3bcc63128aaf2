"""Load and validate TOML profiles; every mistake is a ConfigError naming file, key and expectation.

Validation happens once, here, so a station type that loads is one the drivers can trust: no
unknown keys, every required canonical field mapped, units known, patterns compiled, register
blocks that fit a single Modbus read and do not overlap.
"""

from __future__ import annotations

import codecs
import itertools
import math
import re
import tomllib
from collections.abc import Mapping, Sequence
from datetime import datetime
from importlib import resources
from pathlib import Path
from typing import Any, NoReturn
from zoneinfo import ZoneInfo, ZoneInfoNotFoundError

from gateway.errors import ConfigError, DecodeError, UnitError
from gateway.profiles.checks import CHECKS
from gateway.profiles.modbus_schema import apply_latest
from gateway.profiles.model import (
    CAL_FIELDS,
    RESULT_FIELDS,
    AckSpec,
    BlockSpec,
    Condition,
    Dialect,
    FieldSpec,
    FixedColumn,
    FrameSpec,
    LineCheck,
    LineKind,
    ModbusSpec,
    NumberText,
    Profile,
    RegisterField,
    RequestSpec,
    RingSpec,
    SerialSpec,
    ValueKind,
)
from gateway.profiles.registers import NUMERIC_TYPES, parse_type
from gateway.profiles.schema import check_document
from gateway.records import StationState, Verdict
from gateway.units import normalise_unit, parse_quantity

__all__ = ["builtin_dir", "builtin_profiles", "load_profile", "parse_profile"]

MAX_READ = 125  # Modbus spec: at most 125 registers per read
_NAME = re.compile(r"^[a-z0-9][a-z0-9._-]*$")
_MISSING: Any = object()
_QUANTITY = {"pressure", "leak", "time", "temperature"}


def builtin_dir() -> Path:
    return Path(str(resources.files("gateway.profiles") / "builtin"))


def builtin_profiles() -> list[str]:
    """Names of the profiles shipped in the package."""
    return sorted(p.stem for p in builtin_dir().glob("*.toml"))


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


def _line_kind(r: _Reader, data: Any, record: str, dialect: str,
               numbers: NumberText | None = None) -> LineKind:
    path = record
    if "dialect" in data:  # a line kind may use another line dialect than the profile's
        choices = ("delimited", "fixed", "regex")
        if dialect == "keyvalue":
            r.fail(f"{path}.dialect", "no per-kind dialect in a keyvalue profile", data["dialect"])
        dialect = r.string(data, "dialect", path, choices=choices)
    allowed = {"delimited": ("dialect", "when", "columns", "fields"),
               "keyvalue": ("when", "fields"),
               "fixed": ("dialect", "when", "columns", "fields"),
               "regex": ("dialect", "when", "pattern", "fields")}[dialect]
    r.table(data, path, allowed)
    names: list[str] | None = None
    columns: tuple[str, ...] = ()
    fixed: tuple[FixedColumn, ...] = ()
    pattern = None
    if dialect == "delimited":
        cols = r.get(data, "columns", path, (list,), "an array of raw field names")
        if not cols or not all(isinstance(c, str) and c for c in cols):
            r.fail(f"{path}.columns", "a non-empty array of non-empty strings", cols)
        if len(set(cols)) != len(cols):
            dup = next(c for c in cols if cols.count(c) > 1)
            r.fail(f"{path}.columns", "unique names", dup)
        columns = tuple(cols)
        names = list(cols)
    elif dialect == "fixed":
        cols = r.get(data, "columns", path, (list,),
                     "an array of { name, start, width } tables")
        built = []
        for i, col in enumerate(cols):
            where = f"{path}.columns[{i}]"
            if not isinstance(col, dict):
                r.fail(where, "a table { name = \"...\", start = 0, width = 4 }", col)
            r.table(col, where, ("name", "start", "width"))
            built.append(FixedColumn(r.string(col, "name", where),
                                     r.integer(col, "start", where, lo=0),
                                     r.integer(col, "width", where, lo=1)))
        if not built:
            r.fail(f"{path}.columns", "at least one column", cols)
        ordered = sorted(built, key=lambda c: c.start)
        for a, b in itertools.pairwise(ordered):
            if b.start < a.start + a.width:
                r.fail(f"{path}.columns", f"columns that do not overlap ({a.name!r} covers "
                       f"{a.start}..{a.start + a.width - 1}, {b.name!r} starts at {b.start})")
        names = [c.name for c in built]
        if len(set(names)) != len(names):
            r.fail(f"{path}.columns", "unique column names")
        fixed = tuple(built)
    elif dialect == "regex":
        pattern = r.string(data, "pattern", path)
        try:
            compiled = re.compile(pattern)
        except re.error as exc:
            r.fail(f"{path}.pattern", f"a valid regular expression ({exc})", pattern)
        if not compiled.groupindex:
            r.fail(f"{path}.pattern", "a regular expression with named groups (?P<name>...)",
                   pattern)
        names = list(compiled.groupindex)
    when = _condition(r, data["when"], f"{path}.when", names) if "when" in data else None
    if when is not None and when.count is not None:
        if dialect != "delimited":
            r.fail(f"{path}.when.fields", "a field count only for delimited lines", when.count)
        if when.count != len(columns):
            r.fail(f"{path}.when.fields", f"{len(columns)} (the number of columns)", when.count)
    fields = _fields(r, r.sub(data, "fields", path), f"{path}.fields", record, registers=False,
                     raw_names=names, numbers=numbers)
    return LineKind(record=record, fields=fields, dialect=dialect,  # type: ignore[arg-type]
                    when=when, columns=columns, fixed=fixed, pattern=pattern)


def _serial(r: _Reader, doc: dict[str, Any], label: str, ref_c: float) -> SerialSpec:
    s = r.sub(doc, "serial", "")
    r.table(s, "serial", ("mode", "baudrate", "bytesize", "parity", "stopbits", "encoding",
                          "terminator", "max_line", "request_gap_s", "requests", "checksum",
                          "frame", "address_field"))
    frame = _frame(r, s)
    address_field = r.string(s, "address_field", "serial", None, nonempty=True)
    checksum = None
    if "checksum" in s:
        c = r.sub(s, "checksum", "serial")
        r.table(c, "serial.checksum", ("algorithm", "marker"))
        checksum = LineCheck(
            r.string(c, "algorithm", "serial.checksum", choices=tuple(CHECKS)),
            r.string(c, "marker", "serial.checksum", "*", nonempty=True),
        )
    mode = r.string(s, "mode", "serial", choices=("stream", "request"))
    baudrate = r.integer(s, "baudrate", "serial", 9600, lo=50, hi=4_000_000)
    bytesize = r.integer(s, "bytesize", "serial", 8, lo=5, hi=8)
    parity = r.string(s, "parity", "serial", "N", ("N", "E", "O", "M", "S"))
    stopbits = r.number(s, "stopbits", "serial", 1.0)
    if stopbits not in (1.0, 1.5, 2.0):
        r.fail("serial.stopbits", "1, 1.5 or 2", s["stopbits"])
    encoding = r.string(s, "encoding", "serial", "ascii")
    try:
        codecs.lookup(encoding)
    except LookupError:
        r.fail("serial.encoding", "a Python codec name such as \"ascii\" or \"latin-1\"",
               encoding)
    terminator = r.string(s, "terminator", "serial", "\r\n")
    max_line = r.integer(s, "max_line", "serial", 1024, lo=16, hi=1_000_000)
    gap = r.number(s, "request_gap_s", "serial", 0.0)
    requests: list[RequestSpec] = []
    raw_requests = s.get("requests", [])
    if not isinstance(raw_requests, list):
        r.fail("serial.requests", "an array of tables [[serial.requests]]", raw_requests)
    if mode == "request" and not raw_requests:
        r.fail("serial.requests", "at least one [[serial.requests]] in request mode (missing)")
    if mode == "stream" and raw_requests:
        r.fail("serial.requests", "no requests in stream mode (the station talks unasked)")
    for i, req in enumerate(raw_requests):
        where = f"serial.requests[{i}]"
        if not isinstance(req, dict):
            r.fail(where, "a table", req)
        r.table(req, where, ("query", "end_line", "lines", "timeout_s", "empty"))
        query = r.string(req, "query", where)
        try:
            query_bytes = query.encode("latin-1")
        except UnicodeEncodeError:
            r.fail(f"{where}.query", "characters U+0000..U+00FF (sent as single bytes)", query)
        _query_template(r, query, f"{where}.query")
        end_line = r.string(req, "end_line", where, None)
        lines = r.integer(req, "lines", where, None, lo=1, hi=1000)
        if frame is not None:
            if end_line is not None or lines is not None:
                r.fail(f"{where}.end_line", "no end_line or lines: a framed answer ends with "
                       "its end byte ([serial].frame)")
        elif (end_line is None) == (lines is None):
            r.fail(f"{where}.end_line", "exactly one of end_line (answer ends with this line) "
                   "or lines (fixed line count)")
        requests.append(RequestSpec(
            query=query_bytes, end_line=end_line, lines=lines,
            timeout_s=r.number(req, "timeout_s", where, 2.0, positive=True),
            empty=r.string(req, "empty", where, None),
        ))
    d = r.sub(doc, "dialect", "")
    r.table(d, "dialect", ("kind", "separator", "pair_separator", "strip", "unknown_keys",
                           *_NUMBER_KEYS))
    numbers = _number_text(r, d, "dialect", "number", None)
    kind = r.string(d, "kind", "dialect", choices=("delimited", "keyvalue", "fixed", "regex"))
    default_sep = "=" if kind == "keyvalue" else ";"
    separator = r.string(d, "separator", "dialect", default_sep, nonempty=True)
    pair_sep = r.string(d, "pair_separator", "dialect", None)
    if pair_sep is not None and kind != "keyvalue":
        r.fail("dialect.pair_separator", "only with kind = \"keyvalue\"", pair_sep)
    if kind == "keyvalue" and pair_sep is None and mode != "request" and frame is None:
        r.fail("dialect.pair_separator", "a pair separator for key=value lines in stream mode "
               "(answer blocks need mode = \"request\" or a [serial].frame)")
    if frame is not None and (kind != "keyvalue" or pair_sep is not None):
        r.fail("serial.frame", "dialect kind = \"keyvalue\" with one pair per line (a framed "
               "record is a block of key/value lines)")
    if address_field is not None and kind != "keyvalue":
        r.fail("serial.address_field", "only with dialect kind = \"keyvalue\"", address_field)
    strip = r.boolean(d, "strip", "dialect", True)
    unknown = r.string(d, "unknown_keys", "dialect", "ignore", choices=("ignore", "reject"))
    if "unknown_keys" in d and kind != "keyvalue":
        r.fail("dialect.unknown_keys", "only with kind = \"keyvalue\"", d["unknown_keys"])
    kinds = []
    for record in ("result", "calibration"):
        if record in doc:
            kinds.append(_line_kind(r, r.sub(doc, record, ""), record, kind, numbers))
    if not kinds:
        r.fail("result", "a [result] and/or [calibration] section (missing)")
    if len(kinds) > 1:
        for k in kinds:
            if k.when is None and k.pattern is None:
                r.fail(f"{k.record}.when", "a discriminator { field = ..., equals = ... } "
                       "telling result lines from calibration lines (missing)")
    if kind == "keyvalue" and len(kinds) == 1 and kinds[0].when is None:
        pass  # a single kind needs no discriminator
    return SerialSpec(mode=mode, baudrate=baudrate, bytesize=bytesize, parity=parity,
                      stopbits=stopbits, encoding=encoding,
                      terminator=terminator.encode("latin-1"), max_line=max_line,
                      requests=requests,
                      dialect=Dialect(kind=kind, kinds=tuple(kinds), separator=separator,
                                      pair_separator=pair_sep, strip=strip,
                                      unknown_keys=unknown),
                      profile_label=label, leak_reference_c=ref_c, request_gap_s=gap,
                      checksum=checksum, frame=frame, address_field=address_field)


def _frame(r: _Reader, s: Mapping[str, Any]) -> FrameSpec | None:
    if "frame" not in s:
        return None
    f = r.sub(s, "frame", "serial")
    r.table(f, "serial.frame", ("start", "end", "check", "max_lines"))
    start = r.string(f, "start", "serial.frame")
    end = r.string(f, "end", "serial.frame")
    for key, value in (("start", start), ("end", end)):
        if len(value) != 1 or ord(value) > 0xFF:
            r.fail(f"serial.frame.{key}", 'one byte, e.g. "\\u0002" (STX) or "\\u0003" (ETX)',
                   value)
    if start == end:
        r.fail("serial.frame.end", "a byte other than the start byte", end)
    check = r.string(f, "check", "serial.frame", None, choices=tuple(CHECKS))
    max_lines = r.integer(f, "max_lines", "serial.frame", 64, lo=1, hi=1000)
    return FrameSpec(start=start, end=end, check=check, max_lines=max_lines)


def _query_template(r: _Reader, query: str, path: str) -> None:
    """A query may name the station's address: ``{address}``, ``{address:02d}``; nothing else
    in braces (write ``{{`` for a literal brace)."""
    import string

    try:
        names = [name for _, name, _, _ in string.Formatter().parse(query) if name is not None]
        query.format(address=1)
    except (ValueError, KeyError, IndexError) as exc:
        r.fail(path, "text with at most {address} filled in (e.g. \"#{address:02d}T\\r\"; "
               f"{{{{ for a brace): {exc}", query)
    if any(n != "address" for n in names):
        r.fail(path, "no field but {address} in braces ({{ for a literal brace)", query)


def _check_layout(r: _Reader, path: str, length: int, guards: Sequence[tuple[str, int, int]],
                  fields: Sequence[FieldSpec]) -> None:
    spans = [(name, at, width) for name, at, width in guards]
    for f in fields:
        assert f.register is not None
        spans.append((f.canonical, f.register.at, f.register.width))
    for name, at, width in spans:
        if at + width > length:
            r.fail(f"{path}.fields.{name}" if not name.endswith("_guard") else f"{path}.{name}",
                   f"registers inside the block of length {length} (at {at} + {width} "
                   f"registers ends at {at + width})")
    spans.sort(key=lambda s: s[1])
    for a, b in itertools.pairwise(spans):
        if b[1] < a[1] + a[2]:
            r.fail(f"{path}.fields.{b[0]}" if not b[0].endswith("_guard") else f"{path}.{b[0]}",
                   f"registers that do not overlap: {a[0]} uses +{a[1]}..+{a[1] + a[2] - 1}, "
                   f"{b[0]} starts at +{b[1]}")


def _modbus(r: _Reader, doc: dict[str, Any], label: str, ref_c: float) -> ModbusSpec:
    m = r.sub(doc, "modbus", "")
    latest = apply_latest(m, r.fail)  # a last-result block: [modbus.result] gets a 1-slot ring
    r.table(m, "modbus", ("framer", "device_id", "function", "poll_interval_s", "timeout_s",
                          "word_order", "byte_order", "baudrate", "bytesize", "parity",
                          "stopbits", "string_encoding", "state", "result", "calibration",
                          "acknowledge"))
    framer = r.string(m, "framer", "modbus", choices=("tcp", "rtu"))
    device_id = r.integer(m, "device_id", "modbus", lo=0, hi=247 if framer == "rtu" else 255)
    function = r.integer(m, "function", "modbus")
    if function not in (3, 4):
        r.fail("modbus.function", "3 (holding registers) or 4 (input registers)", function)
    wo = r.string(m, "word_order", "modbus", "big", ("big", "little"))
    bo = r.string(m, "byte_order", "modbus", "big", ("big", "little"))
    encoding = r.string(m, "string_encoding", "modbus", "ascii")
    try:
        codecs.lookup(encoding)
    except LookupError:
        r.fail("modbus.string_encoding", "a Python codec name such as \"ascii\"", encoding)
    serial_keys = ("baudrate", "bytesize", "parity", "stopbits")
    if framer == "tcp":
        for key in serial_keys:
            if key in m:
                r.fail(f"modbus.{key}", "no serial settings with framer = \"tcp\"", m[key])
    stopbits = r.number(m, "stopbits", "modbus", 1.0)
    if stopbits not in (1.0, 1.5, 2.0):
        r.fail("modbus.stopbits", "1, 1.5 or 2", m["stopbits"])
    regions: list[tuple[str, int, int]] = []

    state = None
    state_map: dict[int, StationState] = {}
    if "state" in m:
        st = r.sub(m, "state", "modbus")
        r.table(st, "modbus.state", ("address", "type", "codes", "word_order", "byte_order"))
        address = r.integer(st, "address", "modbus.state", lo=0, hi=65535)
        type_name = r.string(st, "type", "modbus.state", "uint16", ("uint16", "int16", "uint32"))
        # a standalone register: ``at`` is its absolute address
        state = RegisterField(address, type_name, parse_type(type_name)[1],
                              r.string(st, "word_order", "modbus.state", wo, ("big", "little")),
                              r.string(st, "byte_order", "modbus.state", bo, ("big", "little")))
        codes = r.get(st, "codes", "modbus.state", (dict,), "a table of register value = state")
        states = [s.value for s in StationState]
        for code, target in codes.items():
            where = f"modbus.state.codes.{code}"
            try:
                number = int(code, 0)
            except ValueError:
                r.fail(where, "an integer register value as the key", code)
            if target not in states:
                r.fail(where, "one of " + ", ".join(states), target)
            state_map[number] = StationState(target)
        regions.append(("modbus.state", address, state.width))

    rs = r.sub(m, "result", "modbus")
    path = "modbus.result"
    r.table(rs, path, ("counter_address", "counter_type", "base", "stride", "depth", "length",
                       "head_guard", "tail_guard", "word_order", "byte_order", "fields"))
    counter_type = r.string(rs, "counter_type", path, "uint32", ("uint16", "uint32"))
    counter_address = r.integer(rs, "counter_address", path, lo=0, hi=65535)
    length = r.integer(rs, "length", path, lo=1)
    if length > MAX_READ:
        r.fail(f"{path}.length", f"at most {MAX_READ} registers (one Modbus read)", length)
    stride = r.integer(rs, "stride", path, length, lo=1)
    if stride < length:
        r.fail(f"{path}.stride", f"a stride >= length ({length}) so slots do not overlap", stride)
    depth = r.integer(rs, "depth", path, lo=1, hi=4096)
    base = r.integer(rs, "base", path, lo=0, hi=65535)
    if base + stride * (depth - 1) + length > 65536:
        r.fail(f"{path}.depth", "a ring that ends below address 65536", depth)
    width = parse_type(counter_type)[1]
    rwo = r.string(rs, "word_order", path, wo, ("big", "little"))
    rbo = r.string(rs, "byte_order", path, bo, ("big", "little"))
    head = r.integer(rs, "head_guard", path, lo=0)
    tail = r.integer(rs, "tail_guard", path, lo=0)
    fields = _fields(r, r.sub(rs, "fields", path), f"{path}.fields", "result", registers=True,
                     word_order=rwo, byte_order=rbo)
    guards = [("head_guard", head, width)]
    if latest is None:  # a last-result block has one cycle, standing for both guards
        guards.append(("tail_guard", tail, width))
    _check_layout(r, path, length, guards, fields)
    if latest is None:  # a last-result block's counter lies inside the block
        regions.append((f"{path}.counter_address", counter_address, width))
    regions.append((f"{path}.base", base, base + stride * (depth - 1) + length - base))
    result = RingSpec(counter_address, counter_type, base, stride, depth, length, head, tail,
                      fields, rwo, rbo)

    calibration = None
    if "calibration" in m:
        cs = r.sub(m, "calibration", "modbus")
        path = "modbus.calibration"
        r.table(cs, path, ("counter_address", "counter_type", "address", "length",
                           "head_guard", "tail_guard", "word_order", "byte_order", "fields"))
        ctype = r.string(cs, "counter_type", path, "uint32", ("uint16", "uint32"))
        caddr = r.integer(cs, "counter_address", path, lo=0, hi=65535)
        clen = r.integer(cs, "length", path, lo=1)
        if clen > MAX_READ:
            r.fail(f"{path}.length", f"at most {MAX_READ} registers (one Modbus read)", clen)
        address = r.integer(cs, "address", path, lo=0, hi=65536 - clen)
        cwidth = parse_type(ctype)[1]
        cwo = r.string(cs, "word_order", path, wo, ("big", "little"))
        cbo = r.string(cs, "byte_order", path, bo, ("big", "little"))
        chead = r.integer(cs, "head_guard", path, lo=0)
        ctail = r.integer(cs, "tail_guard", path, lo=0)
        cfields = _fields(r, r.sub(cs, "fields", path), f"{path}.fields", "calibration",
                          registers=True, word_order=cwo, byte_order=cbo)
        _check_layout(r, path, clen, [("head_guard", chead, cwidth),
                                      ("tail_guard", ctail, cwidth)], cfields)
        regions.append((f"{path}.counter_address", caddr, cwidth))
        regions.append((f"{path}.address", address, clen))
        calibration = BlockSpec(caddr, ctype, address, clen, chead, ctail, cfields, cwo, cbo)

    ordered = sorted(regions, key=lambda x: x[1])
    for a, b in itertools.pairwise(ordered):
        if b[1] < a[1] + a[2]:
            r.fail(b[0], f"an address range that does not overlap {a[0]} "
                   f"({a[1]}..{a[1] + a[2] - 1}); got {b[1]}..{b[1] + b[2] - 1}")

    acknowledge = None
    if "acknowledge" in m:
        ack = r.sub(m, "acknowledge", "modbus")
        r.table(ack, "modbus.acknowledge", ("enabled", "address", "type"))
        if r.boolean(ack, "enabled", "modbus.acknowledge", False):
            # always written to a holding register (function 6/16), also when the data are
            # input registers (function 4): stations keep their handshake where they can write
            acknowledge = AckSpec(
                r.integer(ack, "address", "modbus.acknowledge", lo=0, hi=65535),
                r.string(ack, "type", "modbus.acknowledge", "uint32", ("uint16", "uint32")),
            )

    return ModbusSpec(
        framer=framer, device_id=device_id, function=function,
        poll_interval_s=r.number(m, "poll_interval_s", "modbus", 1.0, positive=True),
        timeout_s=r.number(m, "timeout_s", "modbus", 1.0, positive=True),
        word_order=wo, byte_order=bo, state=state, state_map=state_map, result=result,
        calibration=calibration, acknowledge=acknowledge, profile_label=label,
        baudrate=r.integer(m, "baudrate", "modbus", 19200, lo=50, hi=4_000_000),
        bytesize=r.integer(m, "bytesize", "modbus", 8, lo=5, hi=8),
        parity=r.string(m, "parity", "modbus", "N", ("N", "E", "O", "M", "S")),
        stopbits=stopbits, string_encoding=encoding, leak_reference_c=ref_c, latest=latest,
    )


def parse_profile(doc: dict[str, Any], file: str) -> Profile:
    """Validate a parsed TOML document and build the Profile (``file`` names it in errors).

    First the document's shape (``schema.ProfileDocument``: types, choices, ranges), then what
    depends on several keys (units, layouts, line kinds) here."""
    check_document(doc, file)
    r = _Reader(file)
    meta = r.sub(doc, "profile", "")
    r.table(meta, "profile", ("name", "version", "description", "transport", "leak_reference_c"))
    name = r.string(meta, "name", "profile")
    if not _NAME.match(name):
        r.fail("profile.name", "lower-case letters, digits, '.', '_' or '-'", name)
    version = r.string(meta, "version", "profile")
    description = r.string(meta, "description", "profile", "", nonempty=False)
    transport = r.string(meta, "transport", "profile", choices=("serial", "modbus"))
    ref_c = r.number(meta, "leak_reference_c", "profile", 0.0)
    if ref_c not in (0.0, 20.0):
        r.fail("profile.leak_reference_c", "0 or 20 (°C base of sccm)", meta["leak_reference_c"])
    label = f"{name}@{version}"
    allowed = (("profile", "serial", "dialect", "result", "calibration") if transport == "serial"
               else ("profile", "modbus"))
    r.table(doc, "", allowed)
    serial = _serial(r, doc, label, ref_c) if transport == "serial" else None
    modbus = _modbus(r, doc, label, ref_c) if transport == "modbus" else None
    return Profile(name=name, version=version, label=label, description=description,
                   transport=transport, serial=serial, modbus=modbus, source=file)


def _read(path: Path) -> Profile:
    try:
        text = path.read_bytes().decode("utf-8")
    except OSError as exc:
        raise ConfigError(f"{path}: cannot read profile: {exc.strerror or exc}") from None
    except UnicodeDecodeError:
        raise ConfigError(f"{path}: expected a UTF-8 TOML file") from None
    try:
        doc = tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        raise ConfigError(f"{path}: not valid TOML: {exc}") from None
    return parse_profile(doc, str(path))


def load_profile(ref: str | Path, search_dirs: Sequence[Path] = ()) -> Profile:
    """Load a profile by name (searched in ``search_dirs``, then the built-ins) or by path."""
    text = str(ref)
    if isinstance(ref, Path) or text.endswith(".toml") or "/" in text or "\\" in text:
        path = Path(ref)
        if not path.is_file():
            raise ConfigError(f"{path}: profile file not found")
        return _read(path)
    for directory in [*map(Path, search_dirs), builtin_dir()]:
        candidate = directory / f"{text}.toml"
        if candidate.is_file():
            profile = _read(candidate)
            if profile.name != text:
                raise ConfigError(f"{candidate}: profile.name: expected {text!r} (the file "
                                  f"name), got {profile.name!r}; set name = {text!r} in the "
                                  f"file (a copy of a built-in keeps its old name)")
            return profile
    places = ", ".join(str(d) for d in search_dirs) or "no profile directories"
    raise ConfigError(f"profile {text!r}: expected a profile file {text}.toml in {places} or a "
                      f"built-in profile ({', '.join(builtin_profiles())})")
