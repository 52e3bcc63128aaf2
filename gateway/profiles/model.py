"""Frozen profile objects: what the loader builds from TOML and what drivers consume.

A profile says how one station type talks (serial line or Modbus register map) and how each raw
field becomes a canonical field. The objects here are plain data: they import none of the
parsing code. ``decoders`` compiles them into parsers and decoders (built on ``lines``,
``normalise`` and ``registers``), so the imports run one way only.
"""

from __future__ import annotations

import re
from collections.abc import Mapping
from dataclasses import dataclass, field
from typing import TYPE_CHECKING, Any, Literal

from gateway.programs import ProgramParams
from gateway.records import CalibrationEvent, PressureTrace, Rejected, StationState, TestResult

if TYPE_CHECKING:
    from gateway.profiles.modbus_schema import LatestRule
    from gateway.profiles.trace_schema import TraceBlock, TraceLine

__all__ = [
    "CAL_FIELDS",
    "RESULT_FIELDS",
    "AckSpec",
    "BlockSpec",
    "Condition",
    "Decoded",
    "FieldSpec",
    "FixedColumn",
    "FrameSpec",
    "LineCheck",
    "LineKind",
    "ModbusSpec",
    "NumberText",
    "Parsed",
    "Profile",
    "RegisterField",
    "RequestSpec",
    "RingSpec",
    "SerialSpec",
    "StationContext",
]

#: what a record line or register block decodes to
Decoded = TestResult | CalibrationEvent | Rejected
#: what a serial parser hands on: records, quarantine, and pressure curves
Parsed = Decoded | PressureTrace
RecordKind = Literal["result", "calibration"]
ValueKind = Literal[
    "int", "timestamp", "program", "verdict", "text", "bool", "number",
    "pressure", "leak", "time", "temperature",
]

# canonical field → (value kind, required). Modbus results take ``cycle`` from the head guard.
# A station that leaves a field out leaves it absent in the record (the plant's config may
# supply limits and times per program, see gateway.programs); only what a record cannot be
# without is required.
# ``ended_at`` unmapped: the station has no clock, the record takes the gateway's receive time
# and says so (``time_source = "gateway"``); mapped, an empty value is an error.
RESULT_FIELDS: dict[str, tuple[ValueKind, bool]] = {
    "cycle": ("int", True),
    "ended_at": ("timestamp", False),
    "program": ("program", False),
    "verdict": ("verdict", True),
    "test_pressure_pa": ("pressure", False),
    "pressure_loss_pa": ("pressure", False),
    "leak_rate_sccm": ("leak", False),
    "reject_limit_sccm": ("leak", False),
    "lower_limit_sccm": ("leak", False),
    "fill_s": ("time", False),
    "stabilise_s": ("time", False),
    "test_s": ("time", False),
    "part_id": ("text", False),
    "part_family": ("text", False),
    "temperature_c": ("temperature", False),
    "reason": ("text", False),
}
# ratio and sensitivity are derived from the losses when the station does not send them.
CAL_FIELDS: dict[str, tuple[ValueKind, bool]] = {
    "ended_at": ("timestamp", False),
    "program": ("program", False),
    "master_loss_pa": ("pressure", True),
    "standard_loss_pa": ("pressure", True),
    "standard_sccm": ("leak", False),
    "standard_ref_pressure_pa": ("pressure", False),
    "ratio": ("number", False),
    "sensitivity": ("number", False),
    "passed": ("bool", False),
    "reason": ("text", False),
}
#: the program of a record whose station names none (and the config gives no other)
DEFAULT_PROGRAM = "default"


@dataclass(frozen=True)
class StationContext:
    """Per-station facts the profile cannot know; built by the runtime from its config.

    ``program_params`` holds the plant's parameters per program name (``"*"``: the station's
    defaults) for values the station does not send; ``default_program`` names the program of
    a station that sends none.
    """

    station: str
    line: str
    timezone: str = "UTC"
    programs: Mapping[int, str] = field(default_factory=dict)
    program_params: Mapping[str, ProgramParams] = field(default_factory=dict)
    default_program: str = DEFAULT_PROGRAM
    address: int | None = None  # the station's address on a shared line (config overrides)
    traces: bool = False  # the plant collects this station's pressure curves (config)


@dataclass(frozen=True, slots=True)
class RegisterField:
    """Where a value sits and how its words are laid out.

    ``at`` is the offset inside a result slot or calibration block; for the standalone state
    register it is the absolute address.
    """

    at: int
    type: str
    width: int
    word_order: Literal["big", "little"] = "big"
    byte_order: Literal["big", "little"] = "big"
    null: float | int | None = None  # sentinel meaning "no value"; math.nan for NaN
    bit: int | None = None  # one bit of an integer register (0 = least significant)
    mask: int | None = None  # a group of bits, shifted down to its lowest set bit


@dataclass(frozen=True, slots=True)
class NumberText:
    """How a station writes numbers, made plain before they are read.

    Plants write numbers the local way: a decimal comma (``12,48``), thousands separators
    (``2.000,5`` or ``2,000.5``), the sign after the number (``0.3-``), and placeholders such
    as ``---`` for "no value". Each is a per-dialect default and per-field override.
    """

    decimal: str = "."
    thousands: str = ""
    trailing_sign: bool = False
    absent: tuple[str, ...] = ()

    def plain(self, text: str) -> str:
        """The text as a plain decimal ("" when it is a placeholder for no value)."""
        if text in self.absent:
            return ""
        if self.thousands:
            text = text.replace(self.thousands, "")
        if self.decimal != ".":
            text = text.replace(self.decimal, ".")
        if self.trailing_sign and len(text) > 1 and text[-1] in "+-" and text[-2] != "e" \
                and text[-2] != "E":
            text = text[-1] + text[:-1]
        return text


@dataclass(frozen=True, slots=True)
class FieldSpec:
    """How one canonical field is made from one raw field (a column/key/group, or registers)."""

    canonical: str
    kind: ValueKind
    source: str | None = None  # raw field name (lines)
    register: RegisterField | None = None  # modbus
    unit: str | None = None
    unit_from: str | None = None  # raw field holding the unit, e.g. PU=psi
    scale: float = 1.0
    offset: float = 0.0
    empty_none: bool = False  # empty text (or the null sentinel) means "no value"
    codes: Mapping[str, str | bool] | None = None  # verdict / passed code table
    time_format: str | None = None  # strftime pattern, "iso" or "unix"
    timezone: str | None = None  # None: the station's zone (StationContext.timezone)
    program_lookup: bool = False  # number → StationContext.programs
    number: NumberText | None = None  # decimal comma, thousands, trailing sign, placeholders
    join: tuple[str, ...] = ()  # raw fields joined with a space (a date column + a time column)
    constant: Any = None  # a value the profile sets (canonical units); no raw field is read
    # verdict / flag from bits in priority order: the first listed whose bit is set wins
    bit_codes: tuple[tuple[int, str | bool], ...] = ()


@dataclass(frozen=True, slots=True)
class Condition:
    """A discriminator: raw field ``field`` is one of ``values`` (or matches ``matches``), and/or
    the line has ``count`` fields (untagged lines told apart by their shape)."""

    field: str | None
    values: tuple[str, ...] = ()
    count: int | None = None
    matches: str | None = None

    def holds(self, raw: Mapping[str, str], count: int | None = None) -> bool:
        if self.count is not None and count is not None and count != self.count:
            return False
        if self.field is None:
            return True
        value = raw.get(self.field)
        if self.matches is not None:
            return value is not None and re.search(self.matches, value) is not None
        return value in self.values

    def describe(self) -> str:
        parts = []
        if self.count is not None:
            parts.append(f"{self.count} fields")
        if self.field is not None:
            parts.append(f"{self.field} ~ /{self.matches}/" if self.matches is not None
                         else f"{self.field} = {'|'.join(self.values)}")
        return " and ".join(parts)


@dataclass(frozen=True, slots=True)
class FixedColumn:
    name: str
    start: int  # 0-based character index
    width: int


@dataclass(frozen=True, slots=True)
class LineKind:
    """One kind of line/answer (result or calibration) in a serial dialect."""

    record: RecordKind
    fields: tuple[FieldSpec, ...]
    dialect: Literal["delimited", "keyvalue", "fixed", "regex"] = "delimited"
    when: Condition | None = None
    columns: tuple[str, ...] = ()  # delimited
    fixed: tuple[FixedColumn, ...] = ()  # fixed-width
    pattern: str | None = None  # regex with named groups


@dataclass(frozen=True, slots=True)
class Dialect:
    kind: Literal["delimited", "keyvalue", "fixed", "regex"]
    kinds: tuple[LineKind, ...]
    separator: str = ";"
    pair_separator: str | None = None  # keyvalue: pairs on one line instead of one per line
    strip: bool = True
    # keyvalue: "reject" quarantines an answer with a key no field maps (line noise that
    # happens to contain the separator); "ignore" (default) drops such keys
    unknown_keys: Literal["ignore", "reject"] = "ignore"


@dataclass(frozen=True, slots=True)
class RequestSpec:
    """One query of a request/response station and how its answer ends."""

    query: bytes
    end_line: str | None = None
    lines: int | None = None
    timeout_s: float = 2.0
    empty: str | None = None  # an answer consisting of just this line means "nothing yet"

    @property
    def addressed(self) -> bool:
        """The query names the station's address (``{address}``): one line, several stations."""
        return b"{address" in self.query

    def query_for(self, address: int | None) -> bytes:
        """The bytes to send to the station at ``address`` (the loader checked the template)."""
        if not self.addressed:
            return self.query
        return self.query.decode("latin-1").format(address=address or 0).encode("latin-1")


@dataclass(frozen=True, slots=True)
class FrameSpec:
    """A record framed by start and end bytes over several lines, with a block check.

    On the wire: ``<start><line>CRLF<line>CRLF...<end><check hex digits>CRLF``. The check
    covers every byte after ``start`` up to and including ``end`` (line ends included), the
    usual convention for a block check character.
    """

    start: str  # one character, e.g. "\x02" (STX)
    end: str  # one character, e.g. "\x03" (ETX)
    check: str | None = None  # a name in gateway.profiles.checks.CHECKS
    max_lines: int = 64


@dataclass(frozen=True, slots=True)
class LineCheck:
    """A check value at the end of each line: ``<payload><marker><hex digits>``."""

    algorithm: str  # a name in gateway.profiles.checks.CHECKS
    marker: str = "*"


@dataclass(frozen=True)
class SerialSpec:
    mode: Literal["stream", "request"]
    baudrate: int
    bytesize: int
    parity: str
    stopbits: float
    encoding: str
    terminator: bytes
    max_line: int
    requests: list[RequestSpec]
    dialect: Dialect
    profile_label: str
    leak_reference_c: float = 0.0
    request_gap_s: float = 0.0
    checksum: LineCheck | None = None
    frame: FrameSpec | None = None
    address_field: str | None = None  # the answer's key that echoes the station address
    trace: TraceLine | None = None  # how the station sends a test's pressure curve


@dataclass(frozen=True, slots=True)
class RingSpec:
    """The result ring: a counter register and ``depth`` slots of ``length`` registers."""

    counter_address: int
    counter_type: str
    base: int
    stride: int
    depth: int
    length: int
    head_guard: int
    tail_guard: int
    fields: tuple[FieldSpec, ...]
    word_order: Literal["big", "little"] = "big"
    byte_order: Literal["big", "little"] = "big"

    @property
    def counter_registers(self) -> int:
        return 2 if self.counter_type.endswith("32") else 1

    def slot_address(self, cycle: int) -> int:
        return self.base + self.stride * (cycle % self.depth)


@dataclass(frozen=True, slots=True)
class BlockSpec:
    """The newest-calibration block, guarded by its own counter."""

    counter_address: int
    counter_type: str
    address: int
    length: int
    head_guard: int
    tail_guard: int
    fields: tuple[FieldSpec, ...]
    word_order: Literal["big", "little"] = "big"
    byte_order: Literal["big", "little"] = "big"

    @property
    def counter_registers(self) -> int:
        return 2 if self.counter_type.endswith("32") else 1


@dataclass(frozen=True, slots=True)
class AckSpec:
    """Optional acknowledge register: the cycle just read is written here (off by default)."""

    address: int
    type: str


@dataclass(frozen=True)
class ModbusSpec:
    framer: Literal["tcp", "rtu"]
    device_id: int
    function: Literal[3, 4]
    poll_interval_s: float
    timeout_s: float
    word_order: Literal["big", "little"]
    byte_order: Literal["big", "little"]
    state: RegisterField | None
    state_map: dict[int, StationState]
    result: RingSpec
    calibration: BlockSpec | None
    acknowledge: AckSpec | None
    profile_label: str
    baudrate: int = 19200
    bytesize: int = 8
    parity: str = "N"
    stopbits: float = 1
    string_encoding: str = "ascii"
    leak_reference_c: float = 0.0
    latest: LatestRule | None = None  # a single last-result block instead of a ring
    trace: TraceBlock | None = None  # the newest pressure curve in registers


@dataclass(frozen=True)
class Profile:
    """A loaded, validated station profile."""

    name: str
    version: str
    label: str
    description: str
    transport: Literal["serial", "modbus"]
    serial: SerialSpec | None
    modbus: ModbusSpec | None
    source: str = ""  # file it was loaded from
