"""Run a profile over a captured sample (text lines or a register dump) — the integrator's check.

Pure: takes the sample's bytes/JSON document, returns what the gateway would make of it.
"""

from __future__ import annotations

import json
from datetime import datetime
from typing import Any

from gateway.errors import ConfigError, DecodeError
from gateway.profiles.decoders import ModbusDecoder, serial_parser
from gateway.profiles.entries import Entry, FieldOrigin, _origins
from gateway.profiles.model import (
    Decoded,
    FieldSpec,
    Parsed,
    Profile,
    SerialSpec,
    StationContext,
)
from gateway.profiles.normalise import reject
from gateway.profiles.registers import registers_hex
from gateway.records import PressureTrace, Rejected

__all__ = ["Entry", "check_registers", "check_sample", "check_text"]


def _kind_fields(spec: SerialSpec, record: str) -> tuple[FieldSpec, ...]:
    return next((k.fields for k in spec.dialect.kinds if k.record == record), ())


def _line_entries(parser: Any, spec: SerialSpec, lines: list[bytes], start: int,
                  items: list[Parsed]) -> list[Entry]:
    out = []
    for item in items:
        origins: tuple[FieldOrigin, ...] = ()
        if not isinstance(item, Rejected | PressureTrace):
            raw = parser.raw_fields(lines, item.kind)
            origins = _origins(_kind_fields(spec, item.kind), item, raw=raw)
        out.append(Entry(start, f"line {start}", item, origins=origins))
    return out


def _split_lines(data: bytes, terminator: bytes) -> list[bytes]:
    """Lines of a capture; accepts the profile's terminator and plain newlines alike."""
    if terminator and terminator not in (b"\n", b"\r\n"):
        data = data.replace(terminator, b"\n")
    lines = data.split(b"\n")
    if lines and lines[-1] == b"":
        lines.pop()
    return [line[:-1] if line.endswith(b"\r") else line for line in lines]


def check_text(profile: Profile, data: bytes, ctx: StationContext, received_at: datetime
               ) -> list[Entry]:
    """Stream mode: every line alone. Request mode: answers end at END (or every N lines)."""
    spec = profile.serial
    assert spec is not None
    parser = serial_parser(spec, ctx)
    lines = _split_lines(data, spec.terminator)
    out: list[Entry] = []
    if spec.frame is not None:
        return _frames(parser, lines, spec.frame.start.encode("latin-1"),
                       spec.frame.end.encode("latin-1"), received_at)
    if spec.mode == "stream":
        for i, line in enumerate(lines, start=1):
            out += _line_entries(parser, spec, [line], i, parser.parse([line], i, received_at))
        return out
    request = spec.requests[0]
    start = 0
    answer: list[bytes] = []
    for i, line in enumerate(lines):
        if not answer:
            start = i + 1
        stripped = line.strip()
        if request.end_line is not None and stripped == request.end_line.encode("latin-1"):
            out += _answer(parser, answer, start, received_at)
            answer = []
            continue
        answer.append(line)
        if request.lines is not None and len(answer) == request.lines:
            out += _answer(parser, answer, start, received_at)
            answer = []
    if answer:
        out += _answer(parser, answer, start, received_at, unterminated=request.end_line)
    return out


def _frames(parser: Any, lines: list[bytes], stx: bytes, etx: bytes, received_at: datetime
            ) -> list[Entry]:
    """Framed records (either mode): from a line starting with the start byte to the line
    holding the end byte; a line outside a frame (an empty marker, noise) goes alone."""
    out: list[Entry] = []
    frame: list[bytes] = []
    start = 0
    for i, line in enumerate(lines, start=1):
        if line.startswith(stx):
            if frame:  # a frame cut short by the next one
                out += _answer(parser, frame, start, received_at)
            frame, start = [], i
        if not frame and not line.startswith(stx):
            if line.strip():
                out += _answer(parser, [line], i, received_at)
            continue
        frame.append(line)
        if etx in line:
            out += _answer(parser, frame, start, received_at)
            frame = []
    if frame:
        out += _answer(parser, frame, start, received_at)
    return out


def _answer(parser: Any, answer: list[bytes], start: int, received_at: datetime,
            unterminated: str | None = None) -> list[Entry]:
    if unterminated is not None:
        raw = "\n".join(a.decode("latin-1") for a in answer)
        item = reject(parser.ctx, parser.label, raw,
                      f"answer ends without the {unterminated!r} line", received_at, start)
        return [Entry(start, f"line {start}", item)]
    items = parser.parse(answer, start, received_at)
    if not items:
        return [Entry(start, f"line {start}", None, "empty answer")]
    return _line_entries(parser, parser.spec, answer, start, items)


def _regs(value: Any, where: str, file: str) -> list[int]:
    if not isinstance(value, list) or not all(
        isinstance(v, int) and not isinstance(v, bool) for v in value
    ):
        raise ConfigError(f"{file}: {where}: expected an array of register values (integers)")
    return value


def check_registers(profile: Profile, doc: Any, ctx: StationContext, received_at: datetime,
                    file: str = "sample") -> list[Entry]:
    """A register dump (see README): counters, state, result slots, calibration blocks."""
    spec = profile.modbus
    assert spec is not None
    decoder = ModbusDecoder(spec)
    if not isinstance(doc, dict):
        raise ConfigError(f"{file}: expected a JSON object with results/calibrations arrays")
    known = ("profile", "comment", "counter", "calibration_counter", "state", "results",
             "calibrations")
    for key in doc:
        if key not in known:
            raise ConfigError(f"{file}: {key}: unknown key; expected one of {', '.join(known)}")
    out: list[Entry] = []

    def value_note(label: str, func: Any, regs: list[int]) -> None:
        try:
            out.append(Entry(0, label, None, f"{func(regs)}  ({registers_hex(0, regs)[4:]})"))
        except (DecodeError, ValueError) as exc:
            out.append(Entry(0, label, None, f"cannot decode: {exc}"))

    if "state" in doc:
        value_note("state", lambda r: decoder.decode_state(r) or "unknown code",
                   _regs(doc["state"], "state", file))
    if "counter" in doc:
        value_note("counter", decoder.decode_counter, _regs(doc["counter"], "counter", file))
    if "calibration_counter" in doc:
        value_note("calibration counter", decoder.decode_calibration_counter,
                   _regs(doc["calibration_counter"], "calibration_counter", file))
    for section, key in (("results", "cycle"), ("calibrations", "counter")):
        items = doc.get(section, [])
        if not isinstance(items, list):
            raise ConfigError(f"{file}: {section}: expected an array of objects")
        if section == "calibrations" and items and spec.calibration is None:
            raise ConfigError(f"{file}: calibrations: this profile has no calibration block")
        for i, entry in enumerate(items, start=1):
            where = f"{section}[{i - 1}]"
            if not isinstance(entry, dict) or set(entry) - {key, "registers", "comment"}:
                raise ConfigError(f"{file}: {where}: expected {{\"{key}\": n, \"registers\": "
                                  "[...]} (and optionally \"comment\")")
            expected = entry.get(key)
            if isinstance(expected, bool) or not isinstance(expected, int) or expected < 0:
                raise ConfigError(f"{file}: {where}.{key}: expected a non-negative integer")
            regs = _regs(entry.get("registers"), f"{where}.registers", file)
            if section == "results":
                item: Decoded = decoder.decode_result(regs, expected, ctx, received_at)
                fields = spec.result.fields
            else:
                item = decoder.decode_calibration(regs, expected, ctx, received_at)
                fields = spec.calibration.fields if spec.calibration is not None else ()
            if hasattr(item, "line_no") and item.line_no is None:  # Rejected: say which entry
                item = reject(ctx, item.profile, item.raw, item.reason, received_at, i)
            out.append(Entry(i, f"{where} {key} {expected}", item,
                             origins=_origins(fields, item, registers=regs)))
    return out


def check_sample(profile: Profile, data: bytes, ctx: StationContext, received_at: datetime,
                 file: str = "sample") -> list[Entry]:
    """Dispatch on the profile's transport; ConfigError for a sample that cannot be read."""
    if profile.transport == "serial":
        return check_text(profile, data, ctx, received_at)
    try:
        doc = json.loads(data.decode("utf-8"))
    except (UnicodeDecodeError, json.JSONDecodeError) as exc:
        raise ConfigError(f"{file}: expected a register dump in JSON ({exc})") from None
    from gateway.profiles.check_image import check_image, is_image

    if is_image(doc):  # what 'leakfleet probe modbus --dump' wrote
        return check_image(profile, doc, ctx, received_at, file)
    return check_registers(profile, doc, ctx, received_at, file)
