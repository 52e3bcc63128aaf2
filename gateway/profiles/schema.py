"""The shape of a profile file, as pydantic models: checked first by the loader, and exported
as JSON Schema (``schemas/profile.schema.json``) so editors complete and check profiles as
they are typed.

The models state every table and key with its type, choices and range; what depends on other
keys (units known for a field's kind, fields inside their block, line kinds told apart) is the
loader's second pass. ``check_document`` turns the first pydantic error into the loader's
one line: file, key path, what was expected and what was found.
"""

from __future__ import annotations

import re
from typing import Any, Literal

from pydantic import BaseModel, ConfigDict, Field, ValidationError

from gateway.errors import ConfigError
from gateway.profiles.modbus_schema import LatestRule
from gateway.profiles.trace_schema import TraceBlock, TraceLine

__all__ = ["ProfileDocument", "check_document", "check_with", "error_line",
           "profile_json_schema"]

Order = Literal["big", "little"]
Names = str | list[str]


class _Table(BaseModel):
    model_config = ConfigDict(extra="forbid", populate_by_name=True)


class Header(_Table):
    name: str = Field(pattern=r"^[a-z0-9][a-z0-9._-]*$",
                      description="profile name: lower-case letters, digits, '.', '_', '-'")
    version: str
    description: str = ""
    transport: Literal["serial", "modbus"]
    leak_reference_c: Literal[0, 20] = Field(default=
        0, description="°C base of the station's sccm (0 or 20)")


class LineCheck(_Table):
    algorithm: Literal["xor8", "lrc8", "crc16-modbus", "crc16-ccitt-false", "crc16-xmodem"]
    marker: str = "*"


class Frame(_Table):
    start: str = Field(min_length=1, max_length=1, description='one byte, e.g. "\\u0002"')
    end: str = Field(min_length=1, max_length=1, description='one byte, e.g. "\\u0003"')
    check: Literal["xor8", "lrc8", "crc16-modbus", "crc16-ccitt-false", "crc16-xmodem"] | None \
        = None
    max_lines: int = Field(default=64, ge=1, le=1000)


class Request(_Table):
    query: str = Field(description="bytes to send; {address} is the station's address")
    end_line: str | None = None
    lines: int | None = Field(default=None, ge=1, le=1000)
    timeout_s: float = Field(default=2.0, gt=0)
    empty: str | None = None


class Serial(_Table):
    mode: Literal["stream", "request"]
    baudrate: int = Field(default=9600, ge=50, le=4_000_000)
    bytesize: int = Field(default=8, ge=5, le=8)
    parity: Literal["N", "E", "O", "M", "S"] = "N"
    stopbits: float = Field(default=1, json_schema_extra={"enum": [1, 1.5, 2]})
    encoding: str = "ascii"
    terminator: str = "\r\n"
    max_line: int = Field(default=1024, ge=16, le=1_000_000)
    request_gap_s: float = Field(default=0.0, ge=0)
    requests: list[Request] = []
    checksum: LineCheck | None = None
    frame: Frame | None = None
    address_field: str | None = Field(default=None, min_length=1)


class _Numbers(_Table):
    decimal: Literal[".", ","] | None = None
    thousands: Literal["", ".", ",", " ", "'"] | None = None
    sign: Literal["leading", "trailing"] | None = None
    absent: Names | None = None


class Dialect(_Numbers):
    kind: Literal["delimited", "keyvalue", "fixed", "regex"]
    separator: str | None = Field(default=None, min_length=1)
    pair_separator: str | None = None
    strip: bool = True
    unknown_keys: Literal["ignore", "reject"] = "ignore"


class Condition(_Table):
    field: str | None = None
    equals: Names | None = None
    matches: str | None = None
    fields: int | None = Field(default=None, ge=1)


class _Conversion(_Table):
    """What turns a raw value into a canonical one, for text and register fields alike."""

    unit: str | None = None
    scale: float = 1.0
    offset: float = 0.0
    empty: Literal["none", "error"] | None = None
    codes: dict[str, str | bool] | None = None
    format: str | None = None
    timezone: str | None = None


class TextField(_Numbers, _Conversion):
    """A canonical field made from raw text: ``{ from = "leak", unit = "sccm" }``."""

    from_: Names | None = Field(default=None, alias="from")
    unit_from: str | None = None
    programs: bool = False
    value: str | float | None = None


class FixedColumn(_Table):
    name: str
    start: int = Field(ge=0)
    width: int = Field(ge=1)


class LineKind(_Table):
    dialect: Literal["delimited", "keyvalue", "fixed", "regex"] | None = None
    when: Condition | None = None
    columns: list[str] | list[FixedColumn] | None = None
    pattern: str | None = None
    fields: dict[str, str | TextField]


class RegisterField(_Conversion):
    """A canonical field made from registers: ``{ at = 4, type = "float32", unit = "kPa" }``."""

    at: int = Field(ge=0)
    type: str = Field(description="int16, uint16, int32, uint32, float32, float64 or string(n)")
    word_order: Order | None = None
    byte_order: Order | None = None
    null: float | str | None = None
    bit: int | None = Field(default=None, ge=0, le=31)
    mask: int | None = Field(default=None, ge=1)
    bits: dict[str, int] | None = None


class RegisterState(_Table):
    address: int = Field(ge=0, le=65535)
    type: str = "uint16"
    codes: dict[str, str]
    word_order: Order | None = None
    byte_order: Order | None = None


class Ring(_Table):
    counter_address: int | None = Field(default=None, ge=0, le=65535)
    counter_type: Literal["uint16", "uint32"] | None = None
    base: int | None = Field(default=None, ge=0, le=65535)
    stride: int | None = Field(default=None, ge=1)
    depth: int | None = Field(default=None, ge=1, le=4096)
    length: int | None = Field(default=None, ge=1)
    head_guard: int | None = Field(default=None, ge=0)
    tail_guard: int | None = Field(default=None, ge=0)
    word_order: Order | None = None
    byte_order: Order | None = None
    fields: dict[str, RegisterField]


class Block(_Table):
    counter_address: int = Field(ge=0, le=65535)
    counter_type: Literal["uint16", "uint32"] = "uint32"
    address: int = Field(ge=0, le=65535)
    length: int = Field(ge=1)
    head_guard: int = Field(ge=0)
    tail_guard: int = Field(ge=0)
    word_order: Order | None = None
    byte_order: Order | None = None
    fields: dict[str, RegisterField]


class Acknowledge(_Table):
    enabled: bool = False
    address: int | None = Field(default=None, ge=0, le=65535)
    type: Literal["uint16", "uint32"] = "uint32"


class Modbus(_Table):
    framer: Literal["tcp", "rtu"]
    device_id: int = Field(ge=0, le=255)
    function: int = Field(json_schema_extra={"enum": [3, 4]},
                          description="3 (holding registers) or 4 (input registers)")
    poll_interval_s: float = Field(default=1.0, gt=0)
    timeout_s: float = Field(default=2.0, gt=0)
    word_order: Order = "big"
    byte_order: Order = "big"
    baudrate: int = Field(default=19200, ge=50, le=4_000_000)
    bytesize: int = Field(default=8, ge=5, le=8)
    parity: Literal["N", "E", "O", "M", "S"] = "N"
    stopbits: float = Field(default=1, json_schema_extra={"enum": [1, 1.5, 2]})
    string_encoding: str = "ascii"
    state: RegisterState | None = None
    result: Ring
    calibration: Block | None = None
    acknowledge: Acknowledge | None = None
    latest: LatestRule | None = None
    trace: TraceBlock | None = None


class ProfileDocument(_Table):
    """A station profile (TOML): ``[profile]`` and either the serial or the Modbus tables."""

    model_config = ConfigDict(extra="forbid", populate_by_name=True,
                              json_schema_extra={"title": "leakfleet station profile"})

    profile: Header
    serial: Serial | None = None
    dialect: Dialect | None = None
    result: LineKind | None = None
    calibration: LineKind | None = None
    trace: TraceLine | None = None
    modbus: Modbus | None = None


_TYPES = {"string_type": "a string", "int_type": "an integer", "float_type": "a number",
          "bool_type": "true or false", "dict_type": "a table", "model_type": "a table",
          "list_type": "an array", "int_parsing": "an integer", "float_parsing": "a number",
          "string_too_short": "a non-empty string", "bool_parsing": "true or false"}


def _describe(value: object) -> str:
    names = {bool: "a boolean", int: "an integer", float: "a number", str: "a string",
             list: "an array", dict: "a table"}
    return f"{names.get(type(value), type(value).__name__)} {value!r}"[:80]


def _expected(err: Any) -> str:
    kind = err["type"]
    ctx = err.get("ctx") or {}
    if kind == "literal_error":
        return "one of " + str(ctx.get("expected", "")).replace(" or ", ", ")
    if kind in ("greater_than_equal", "less_than_equal", "greater_than", "less_than"):
        return str(err["msg"]).lower().replace("input should be ", "a value ")
    if kind == "string_pattern_mismatch":
        return "lower-case letters, digits, '.', '_' or '-'"
    if kind in ("string_too_short", "string_too_long"):
        return str(err["msg"]).lower().replace("string should have ", "text with ")
    return _TYPES.get(kind, str(err["msg"]).removeprefix("Value error, "))


def error_line(file: str, errors: list[Any], prefix: tuple[str | int, ...] = ()) -> str:
    """The first error as the loaders' one line: ``file: key.path: expected ..., got ...``.

    A value that may take several forms (a raw field name or a table; one name or a list)
    fails once per form: those complaints are joined ("a string or an array")."""
    def where(err: Any) -> str:
        loc = [_part(p) for p in (*prefix, *err["loc"]) if not _is_union_member(p)]
        return ".".join(loc) or "(top level)"

    first = where(errors[0])
    # the deepest complaint about that place: a table's own key beats "not a string"
    same = [e for e in errors if where(e) == first]
    deeper = [e for e in errors if where(e).startswith(first + ".")]
    if deeper and all(e["type"] in ("string_type", "list_type") for e in same):
        return error_line(file, deeper, prefix)
    expected = " or ".join(dict.fromkeys(_expected(e) for e in same))
    return f"{file}: {first}: expected {expected}, got {_describe(errors[0].get('input'))}"


def _is_union_member(part: object) -> bool:
    # pydantic names the union member it tried ("str", "TextField", "list[str]") in the path
    text = str(part)
    return text in _MODEL_NAMES or text in ("str", "int", "float", "bool", "date") \
        or "[" in text


def _part(part: object) -> str:
    """A key as the loaders write it: table keys plain, names of the user's own (program
    names, codes) quoted."""
    text = str(part)
    return text if isinstance(part, int) or re.fullmatch(r"[a-z_][a-z0-9_]*", text) \
        else f'"{text}"'


def _model_names() -> set[str]:
    seen: set[str] = set()
    todo: list[type] = [BaseModel]
    while todo:
        subclasses: list[type] = todo.pop().__subclasses__()
        for sub in subclasses:
            if sub.__name__ not in seen:
                seen.add(sub.__name__)
                todo.append(sub)
    return seen


#: left to the loader's second pass, which names the keys it knows or the section missing
_SECOND_PASS = ("extra_forbidden", "missing")


_MODEL_NAMES: set[str] = set()


def check_with(model: type[BaseModel], doc: dict[str, Any], file: str,
               second_pass: tuple[str, ...] = _SECOND_PASS) -> None:
    """Validate ``doc`` against ``model``; the first error (other than those left to the
    loader's second pass) as a one-line ConfigError."""
    if not _MODEL_NAMES:
        _MODEL_NAMES.update(_model_names())
    try:
        model.model_validate(doc)
    except ValidationError as exc:
        errors = [e for e in exc.errors() if e["type"] not in second_pass]
        if errors:
            raise ConfigError(error_line(file, errors)) from None


def check_document(doc: dict[str, Any], file: str) -> None:
    """The loader's first pass: every value of the document has the right type, choice and
    range. Unknown and missing keys are named (with the keys that are known) by the second."""
    check_with(ProfileDocument, doc, file)


def profile_json_schema() -> dict[str, Any]:
    schema = ProfileDocument.model_json_schema(by_alias=True)
    schema["$schema"] = "https://json-schema.org/draft/2020-12/schema"
    return schema
