"""Line dialects: split a line (or a key=value answer block) into raw named fields.

Four dialects cover what serial stations send: delimited (a separator and a field list per line
kind), key=value (one pair per line in an answer block, or several pairs on one line), fixed-width
columns, and a regular expression with named groups. A discriminator condition says which line
kind (result or calibration) a line is; the kind's field mapping then makes the record.
"""

from __future__ import annotations

import dataclasses
import operator
import re
from collections.abc import Callable, Mapping, Sequence
from datetime import datetime
from typing import Any

from gateway.profiles.checks import CHECKS
from gateway.profiles.model import FieldSpec, LineKind, Parsed, SerialSpec, StationContext
from gateway.profiles.normalise import (
    FieldError,
    TextConverter,
    clip_raw,
    compile_text_field,
    make_record,
    reject,
)
from gateway.profiles.trace_lines import TraceCollector
from gateway.records import TestResult, Verdict

__all__ = ["SerialParser", "split_fields"]


class _NoMatch(Exception):
    """The line is not of this kind (try the next one)."""


def _clean(text: str, strip: bool) -> str:
    return text.strip() if strip else text


def split_fields(spec: SerialSpec, kind: LineKind, text: str) -> dict[str, str]:
    """Raw fields of one line for one line kind; raises _NoMatch or FieldError."""
    dialect = spec.dialect
    strip = dialect.strip
    if kind.dialect == "delimited":
        parts = [_clean(p, strip) for p in text.split(dialect.separator)]
        raw = dict(zip(kind.columns, parts, strict=False))
        if kind.when is not None and not kind.when.holds(raw, len(parts)):
            raise _NoMatch
        if len(parts) != len(kind.columns):
            raise FieldError(
                f"{kind.record} line has {len(parts)} fields separated by "
                f"{dialect.separator!r}, expected {len(kind.columns)}"
            )
        return raw
    if kind.dialect == "fixed":
        raw = {c.name: _clean(text[c.start : c.start + c.width], strip) for c in kind.fixed}
        if kind.when is not None and not kind.when.holds(raw):
            raise _NoMatch
        need = max(c.start + c.width for c in kind.fixed)
        if len(text.rstrip()) > need:
            raise FieldError(
                f"{kind.record} line is {len(text.rstrip())} characters, expected at most {need}"
            )
        return raw
    if kind.dialect == "regex":
        assert kind.pattern is not None
        match = re.fullmatch(kind.pattern, text)
        if match is None:
            raise _NoMatch
        raw = {k: _clean(v or "", strip) for k, v in match.groupdict().items()}
        if kind.when is not None and not kind.when.holds(raw):
            raise _NoMatch
        return raw
    raise AssertionError(kind.dialect)


def _pairs(spec: SerialSpec, lines: Sequence[str], first_line_no: int) -> dict[str, str]:
    """key=value pairs of an answer block (or of one line when pairs share a line)."""
    dialect = spec.dialect
    items: list[tuple[int, str]] = []
    for i, line in enumerate(lines):
        if dialect.pair_separator is not None:
            items += [(i, p) for p in line.split(dialect.pair_separator) if p.strip()]
        else:
            items.append((i, line))
    raw: dict[str, str] = {}
    for i, item in items:
        key, sep, value = item.partition(dialect.separator)
        key = _clean(key, dialect.strip)
        if not sep or not key:
            raise FieldError(
                f"line {first_line_no + i}: {item[:40]!r} is not key{dialect.separator}value"
            )
        if key in raw:
            raise FieldError(f"line {first_line_no + i}: key {key!r} appears twice")
        raw[key] = _clean(value, dialect.strip)
    return raw


_CONTROL = re.compile("[\x00-\x08\x0a-\x1f\x7f]")  # control characters except tab


# TestResult fields the parser fills from the station context and the line itself
_CONTEXT_FIELDS = ("station", "line", "received_at", "raw", "profile")


#: the defaults a positional TestResult call can take from the constants tuple, by position
_CONSTANTS: tuple[Any, ...] = (None, "", "station", ())
_FIRST_VALUE = len(_CONTEXT_FIELDS) + len(_CONSTANTS)


def _result_picker(fields: Sequence[FieldSpec]) -> Callable[[tuple[Any, ...]], Any] | None:
    """Where each TestResult argument sits in (context values, constants, converted values...),
    or None when a positional call could differ from make_record's keyword one: a required
    field not mapped, or a mapped field whose "no value" (None) is not its default."""
    at = {f.canonical: _FIRST_VALUE + i for i, f in enumerate(fields)}
    empty_ok = {f.canonical: f.empty_none for f in fields}
    order: list[int] = []
    for i, dfield in enumerate(dataclasses.fields(TestResult)):
        if dfield.name in _CONTEXT_FIELDS:
            order.append(_CONTEXT_FIELDS.index(dfield.name))
            continue
        default = dfield.default
        if dfield.name in at:
            if empty_ok[dfield.name] and default is not None:
                return None
            order.append(at[dfield.name])
        elif default is dataclasses.MISSING:
            return None
        else:
            found = [k for k, c in enumerate(_CONSTANTS) if type(c) is type(default)
                     and c == default]
            if not found:
                return None
            order.append(len(_CONTEXT_FIELDS) + found[0])
        if i == 6 and dfield.name != "verdict":
            return None
    return operator.itemgetter(*order)


def _constant(value: Any) -> TextConverter:
    def constant(text: str | None, raw: Mapping[str, str]) -> Any:
        return value

    return constant


def _joined(names: tuple[str, ...], source: str, convert: TextConverter) -> TextConverter:
    """A field made of several raw fields joined with a space (date column + time column)."""

    def joined(text: str | None, raw: Mapping[str, str]) -> Any:
        text = " ".join(p for p in (raw.get(n) for n in names) if p) or None
        return convert(text, {**raw, source: text} if text is not None else raw)

    return joined


class _Plan:
    """One line kind with its per-line work done once: compiled field converters and, for a
    delimited kind, where each field and the discriminator sit among the columns."""

    __slots__ = ("constants", "converters", "delimited", "kind", "known_keys", "names", "ncols",
                 "needs_raw", "pick", "sources", "when_at", "when_count", "when_re",
                 "when_values")

    def __init__(self, kind: LineKind, ctx: StationContext, reference_c: float) -> None:
        self.kind = kind
        self.delimited = kind.dialect == "delimited"
        self.ncols = len(kind.columns)
        at = {name: i for i, name in enumerate(kind.columns)}
        when = kind.when
        self.when_at = None if when is None or when.field is None else at.get(when.field, -1)
        self.when_values = () if when is None else when.values
        self.when_count = None if when is None else when.count
        self.when_re = None if when is None or when.matches is None else re.compile(when.matches)
        converters: list[tuple[int, TextConverter]] = []
        needs_raw = False
        for fspec in kind.fields:
            if fspec.constant is not None:
                converters.append((-1, _constant(fspec.constant)))
                continue
            convert, wants_raw = compile_text_field(fspec, ctx, reference_c)
            needs_raw = needs_raw or wants_raw
            assert fspec.source is not None
            if fspec.join:
                convert = _joined(fspec.join, fspec.source, convert)
                needs_raw = True
            converters.append((at.get(fspec.source, -1), convert))
        self.converters = tuple(converters)
        self.names = tuple(f.canonical for f in kind.fields)
        self.sources = tuple(f.source or "" for f in kind.fields)
        self.constants = tuple(f.canonical for f in kind.fields if f.constant is not None)
        self.known_keys = frozenset(
            {f.source for f in kind.fields if f.source}
            | {n for f in kind.fields for n in f.join}
            | {f.unit_from for f in kind.fields if f.unit_from}
            | ({when.field} if when is not None and when.field is not None else set())
        )
        self.needs_raw = needs_raw
        plain = not self.constants and not any(f.join for f in kind.fields)
        self.pick = _result_picker(kind.fields) if kind.record == "result" and plain else None

    def values_of(self, parts: list[str]) -> list[Any]:
        """Each field's canonical value (None: no value) from a delimited line's columns."""
        raw = dict(zip(self.kind.columns, parts, strict=True)) if self.needs_raw else {}
        return [convert(parts[at] if at >= 0 else None, raw) for at, convert in self.converters]

    def values_from(self, raw: dict[str, str]) -> list[Any]:
        """Each field's canonical value (None: no value) from named raw fields."""
        return [convert(raw.get(source), raw)
                for source, (_, convert) in zip(self.sources, self.converters, strict=True)]

    def record(self, values: list[Any], ctx: StationContext, label: str, raw: str,
               received_at: datetime, line_no: int | None) -> Parsed:
        """make_record of these values; a result by position when that is the same call."""
        if self.pick is not None and not ctx.program_params:
            args = self.pick((ctx.station, ctx.line, received_at, clip_raw(raw), label,
                              *_CONSTANTS, *values))
            if type(args[6]) is Verdict:
                try:
                    return TestResult(*args)
                except (ValueError, TypeError) as exc:
                    return reject(ctx, label, raw, f"result not valid: {exc}", received_at,
                                  line_no)
        present = {k: v for k, v in zip(self.names, values, strict=True) if v is not None}
        if self.constants:  # values the profile states: on record as such
            present["supplied"] = tuple((name, "profile") for name in sorted(self.constants))
        return make_record(self.kind.record, present, ctx, label, raw, received_at, line_no)


class SerialParser:
    """Turns station output into records for one station; never raises for bad input."""

    def __init__(self, spec: SerialSpec, ctx: StationContext) -> None:
        self.spec = spec
        self.ctx = ctx
        self.label = spec.profile_label
        self._plans = tuple(_Plan(k, ctx, spec.leak_reference_c) for k in spec.dialect.kinds)
        self._empty = frozenset(r.empty for r in spec.requests if r.empty is not None)
        self._block = spec.dialect.kind == "keyvalue" and spec.dialect.pair_separator is None
        self._frame = spec.frame
        self._traces = (TraceCollector(spec.trace, ctx, self.label)
                        if spec.trace is not None else None)

    def _decode(self, item: str | bytes) -> str:
        if isinstance(item, str):
            return item
        try:
            text = item.decode(self.spec.encoding)
        except UnicodeDecodeError as exc:
            raise FieldError(
                f"not valid {self.spec.encoding}: byte 0x{item[exc.start]:02x} at "
                f"position {exc.start}"
            ) from None
        return text

    def _raw_of(self, item: str | bytes) -> str:
        """Audit text: the line itself, or its bytes as hex when they are not valid text."""
        if isinstance(item, str):
            return item
        try:
            return item.decode(self.spec.encoding)
        except UnicodeDecodeError:
            return item.hex(" ")

    def _precheck(self, item: str | bytes) -> str:
        if len(item) > self.spec.max_line:
            raise FieldError(f"line is {len(item)} characters long, max_line is "
                             f"{self.spec.max_line}")
        text = self._decode(item)
        found = _CONTROL.search(text)  # one C-level scan: this runs for every line
        if found is not None:
            bad = found.group()
            raise FieldError(f"control character 0x{ord(bad):02x} at position {found.start()}")
        if self.spec.checksum is not None:
            text = self._checked(text)
        return text

    def _checked(self, text: str) -> str:
        """The line without its check value, when the value is right; else a FieldError."""
        check = self.spec.checksum
        assert check is not None
        payload, marker, value = text.rpartition(check.marker)
        fn, digits = CHECKS[check.algorithm]
        if not marker:
            raise FieldError(f"checksum: no {check.marker!r} before a check value")
        value = value.strip()
        if len(value) != digits or not all(c in "0123456789abcdefABCDEF" for c in value):
            raise FieldError(f"checksum: {value[:8]!r} is not {digits} hex digits")
        computed = fn(payload.encode(self.spec.encoding, "replace"))
        if int(value, 16) != computed:
            raise FieldError(f"checksum ({check.algorithm}): the line says {value.upper()}, "
                             f"its bytes give {computed:0{digits}X}")
        return payload

    def parse(
        self,
        lines: Sequence[str | bytes],
        first_line_no: int,
        received_at: datetime,
    ) -> list[Parsed]:
        """Stream mode: one line per call; request mode: one whole answer (END excluded).

        Bytes are decoded with the profile's encoding; a line that is not valid text is rejected
        with its bytes as hex. An answer that is just the profile's "empty" marker gives [].
        """
        if type(lines) is list and len(lines) == 1 and not self._block:
            return self._parse_line(lines[0], first_line_no, received_at)  # a stream line
        lines = list(lines)
        if not lines:
            return []
        if self._frame is not None:
            return self._parse_frame(lines, first_line_no, received_at)
        if self._block:
            return self._parse_block(lines, first_line_no, received_at)
        out: list[Parsed] = []
        for i, item in enumerate(lines):
            out += self._parse_line(item, first_line_no + i, received_at)
        return out

    def _is_empty_marker(self, text: str) -> bool:
        return bool(self._empty) and text.strip() in self._empty

    def _parse_line(self, item: str | bytes, line_no: int, received_at: datetime) -> list[Parsed]:
        raw = item if type(item) is str else self._raw_of(item)
        try:
            text = self._precheck(item)
            if self._empty and self._is_empty_marker(text):
                return []
            if not text.strip():
                raise FieldError("empty line")
            if self.spec.dialect.kind == "keyvalue":
                pairs = _pairs(self.spec, [text], line_no)
                return [self._from_raw(pairs, raw, line_no, received_at)]
            if self._traces is not None:
                return self._traced(text, raw, line_no, received_at)
            return self._match(text, raw, line_no, received_at)
        except FieldError as exc:
            return [reject(self.ctx, self.label, raw, str(exc), received_at, line_no)]

    def _match(self, text: str, raw: str, line_no: int, received_at: datetime,
               parts: list[str] | None = None) -> list[Parsed]:
        """The record a delimited/fixed/regex line is (FieldError: none, or a broken one);
        ``parts``: the line already split by the dialect, when the caller did that."""
        for plan in self._plans:
            kind = plan.kind
            if not plan.delimited:
                try:
                    fields = split_fields(self.spec, kind, text)
                except _NoMatch:
                    continue
                values = plan.values_from(fields)
            else:  # split_fields' delimited branch, by column position
                if parts is None:
                    dialect = self.spec.dialect
                    parts = text.split(dialect.separator)
                    if dialect.strip:
                        parts = [p.strip() for p in parts]
                if plan.when_count is not None and len(parts) != plan.when_count:
                    continue
                if plan.when_at is not None:
                    at = plan.when_at
                    found = parts[at] if 0 <= at < len(parts) else None
                    if plan.when_re is not None:
                        if found is None or plan.when_re.search(found) is None:
                            continue
                    elif found not in plan.when_values:
                        continue
                if len(parts) != plan.ncols:
                    raise FieldError(
                        f"{kind.record} line has {len(parts)} fields separated by "
                        f"{self.spec.dialect.separator!r}, expected {plan.ncols}"
                    )
                values = plan.values_of(parts)
            return [plan.record(values, self.ctx, self.label, raw, received_at, line_no)]
        raise FieldError(self._no_kind_reason())

    def _traced(self, text: str, raw: str, line_no: int, received_at: datetime) -> list[Parsed]:
        """A line of a station that sends curves: a curve's, or a record the curves follow."""
        traces = self._traces
        assert traces is not None
        dialect = self.spec.dialect
        parts = text.split(dialect.separator)
        if dialect.strip:
            parts = [p.strip() for p in parts]
        if traces.in_block and self._is_record(parts):
            traces.cut(line_no, received_at)  # the end line was lost: this is the next record
        taken = traces.take(parts, raw, line_no, received_at)
        cut = traces.pop_pending()
        if taken is not None:
            return cut + taken
        try:
            out = self._match(text, raw, line_no, received_at, parts)
        except FieldError as exc:
            out = [reject(self.ctx, self.label, raw, str(exc), received_at, line_no)]
        for record in out:
            traces.saw(record)
        return cut + out

    def _is_record(self, parts: Sequence[str]) -> bool:
        """Whether a delimited line is told to be a record by a kind's discriminator."""
        for plan in self._plans:
            if not plan.delimited or plan.when_at is None:
                continue
            at = plan.when_at
            found = parts[at] if 0 <= at < len(parts) else None
            if found is None:
                continue
            if (plan.when_re.search(found) is not None if plan.when_re is not None
                    else found in plan.when_values):
                return True
        return False

    def _parse_block(self, lines: Sequence[str | bytes], first: int,
                     received_at: datetime, raw: str | None = None) -> list[Parsed]:
        if raw is None:
            raw = "\n".join(self._raw_of(x) for x in lines)
        try:
            texts = []
            for i, item in enumerate(lines):
                try:
                    texts.append(self._precheck(item))
                except FieldError as exc:
                    raise FieldError(f"line {first + i}: {exc}") from None
            if len(texts) == 1 and self._is_empty_marker(texts[0]):
                return []
            pairs = _pairs(self.spec, [t for t in texts if t.strip()], first)
            return [self._from_raw(pairs, raw, first, received_at)]
        except FieldError as exc:
            return [reject(self.ctx, self.label, raw, str(exc), received_at, first)]

    def _parse_frame(self, lines: list[str | bytes], first: int,
                     received_at: datetime) -> list[Parsed]:
        """A framed record: check start, end and block check, then parse the lines inside."""
        raw = "\n".join(self._raw_of(x) for x in lines)
        try:
            for i, item in enumerate(lines):
                if len(item) > self.spec.max_line:
                    raise FieldError(f"line {first + i} is {len(item)} characters long, "
                                     f"max_line is {self.spec.max_line}")
            texts = [self._decode(x) for x in lines]
            if len(texts) == 1 and self._is_empty_marker(texts[0]):
                return []
            inner = unframe(texts, self.spec)
            return self._parse_block(inner, first, received_at, raw=raw)
        except FieldError as exc:
            return [reject(self.ctx, self.label, raw, str(exc), received_at, first)]

    def raw_fields(self, lines: Sequence[str | bytes], record: str) -> dict[str, str]:
        """The raw fields (columns, keys, groups) an accepted ``record`` was made from, for
        ``profile check``; {} when they cannot be told (the parse itself is the judge)."""
        try:
            texts = [self._decode(x) for x in lines]
            if self._frame is not None:
                texts = unframe(texts, self.spec)
            if self.spec.checksum is not None:
                texts = [self._checked(t) for t in texts]
            if self.spec.dialect.kind == "keyvalue":
                return _pairs(self.spec, [t for t in texts if t.strip()], 1)
            for plan in self._plans:
                if plan.kind.record == record:
                    try:
                        return split_fields(self.spec, plan.kind, texts[0])
                    except _NoMatch:
                        continue
        except FieldError:
            pass
        return {}

    def _address_check(self, pairs: dict[str, str]) -> None:
        key, want = self.spec.address_field, self.ctx.address
        if key is None:
            return
        got = pairs.pop(key, None)
        if got is None:
            raise FieldError(f"no {key} (the station address) in the answer")
        if want is not None and (not got.strip().isdigit() or int(got) != want):
            raise FieldError(f"answer from station address {got.strip()!r}, this station is "
                             f"{want}: not taken (another station on the line answered)")

    def _from_raw(self, pairs: dict[str, str], raw: str, line_no: int,
                  received_at: datetime) -> Parsed:
        self._address_check(pairs)
        for plan in self._plans:
            kind = plan.kind
            if kind.when is None or kind.when.holds(pairs):
                if self.spec.dialect.unknown_keys == "reject":
                    extra = sorted(k for k in pairs if k not in plan.known_keys)
                    if extra:
                        shown = ", ".join(repr(k[:20]) for k in extra[:3])
                        raise FieldError(
                            f"{kind.record} answer has key(s) no field maps: {shown} "
                            "(unknown_keys = \"reject\")"
                        )
                return plan.record(plan.values_from(pairs), self.ctx, self.label, raw,
                                   received_at, line_no)
        raise FieldError(self._no_kind_reason())

    def _no_kind_reason(self) -> str:
        wants = []
        for kind in self.spec.dialect.kinds:
            if kind.when is not None:
                wants.append(f"{kind.when.describe()} ({kind.record})")
            elif kind.pattern is not None:
                wants.append(f"the {kind.record} pattern")
        return "matches no line kind; expected " + " or ".join(wants)


def unframe(texts: Sequence[str], spec: SerialSpec) -> list[str]:
    """The lines inside a frame, once its start and end bytes and its block check are right.

    ``texts`` are the frame's lines without their terminators, as received. The check covers
    every byte after the start byte up to and including the end byte, line ends included
    (rebuilt with the profile's terminator), and is written as hex digits after the end byte.
    """
    frame = spec.frame
    assert frame is not None
    if not texts or not texts[0].startswith(frame.start):
        raise FieldError(f"frame: the first line does not start with {_show(frame.start)}")
    last = texts[-1]
    cut = last.find(frame.end)
    if cut < 0:
        raise FieldError(f"frame: no {_show(frame.end)} (end of frame) in the last line")
    if len(texts) > frame.max_lines:
        raise FieldError(f"frame: {len(texts)} lines, max_lines is {frame.max_lines}")
    eol = spec.terminator.decode("latin-1")
    body = [texts[0][1:], *texts[1:-1], last[:cut]]
    if frame.check is not None:
        fn, digits = CHECKS[frame.check]
        value = last[cut + 1:].strip()
        covered = (eol.join(body) + frame.end).encode(spec.encoding, "replace")
        if len(value) != digits or not all(c in "0123456789abcdefABCDEF" for c in value):
            raise FieldError(f"block check ({frame.check}): {value[:8]!r} after "
                             f"{_show(frame.end)} is not {digits} hex digits")
        computed = fn(covered)
        if int(value, 16) != computed:
            raise FieldError(f"block check ({frame.check}): the frame says {value.upper()}, "
                             f"its bytes give {computed:0{digits}X}")
    elif last[cut + 1:].strip():
        raise FieldError(f"frame: text after {_show(frame.end)} and no check configured")
    return [line for line in body if line.strip()]


def _show(char: str) -> str:
    names = {"\x02": "STX", "\x03": "ETX", "\x01": "SOH", "\x04": "EOT", "\x17": "ETB"}
    return names.get(char, repr(char))
