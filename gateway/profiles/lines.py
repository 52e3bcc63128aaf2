"""Line dialects: split a line (or a key=value answer block) into raw named fields.

Four dialects cover what serial stations send: delimited (a separator and a field list per line
kind), key=value (one pair per line in an answer block, or several pairs on one line), fixed-width
columns, and a regular expression with named groups. A discriminator condition says which line
kind (result or calibration) a line is; the kind's field mapping then makes the record.
"""

from __future__ import annotations

import re
from collections.abc import Sequence
from datetime import datetime
from typing import Any

from gateway.profiles.model import LineKind, Parsed, SerialSpec, StationContext
from gateway.profiles.normalise import FieldError, build_record, convert_text, reject

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
        if kind.when is not None and not kind.when.holds(raw):
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


class SerialParser:
    """Turns station output into records for one station; never raises for bad input."""

    def __init__(self, spec: SerialSpec, ctx: StationContext) -> None:
        self.spec = spec
        self.ctx = ctx
        self.label = spec.profile_label

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
        return text

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
        lines = list(lines)
        if not lines:
            return []
        if self.spec.dialect.kind == "keyvalue" and self.spec.dialect.pair_separator is None:
            return self._parse_block(lines, first_line_no, received_at)
        out: list[Parsed] = []
        for i, item in enumerate(lines):
            out += self._parse_line(item, first_line_no + i, received_at)
        return out

    def _is_empty_marker(self, text: str) -> bool:
        return any(r.empty is not None and text.strip() == r.empty for r in self.spec.requests)

    def _parse_line(self, item: str | bytes, line_no: int, received_at: datetime) -> list[Parsed]:
        raw = self._raw_of(item)
        try:
            text = self._precheck(item)
            if self._is_empty_marker(text):
                return []
            if not text.strip():
                raise FieldError("empty line")
            if self.spec.dialect.kind == "keyvalue":
                pairs = _pairs(self.spec, [text], line_no)
                return [self._from_raw(pairs, raw, line_no, received_at)]
            for kind in self.spec.dialect.kinds:
                try:
                    fields = split_fields(self.spec, kind, text)
                except _NoMatch:
                    continue
                return [self._make(kind, fields, raw, line_no, received_at)]
            raise FieldError(self._no_kind_reason())
        except FieldError as exc:
            return [reject(self.ctx, self.label, raw, str(exc), received_at, line_no)]

    def _parse_block(self, lines: list[str | bytes], first: int,
                     received_at: datetime) -> list[Parsed]:
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

    def _from_raw(self, pairs: dict[str, str], raw: str, line_no: int,
                  received_at: datetime) -> Parsed:
        for kind in self.spec.dialect.kinds:
            if kind.when is None or kind.when.holds(pairs):
                return self._make(kind, pairs, raw, line_no, received_at)
        raise FieldError(self._no_kind_reason())

    def _no_kind_reason(self) -> str:
        wants = []
        for kind in self.spec.dialect.kinds:
            if kind.when is not None:
                wants.append(f"{kind.when.field} = {'|'.join(kind.when.values)} ({kind.record})")
            elif kind.pattern is not None:
                wants.append(f"the {kind.record} pattern")
        return "matches no line kind; expected " + " or ".join(wants)

    def _make(self, kind: LineKind, fields: dict[str, str], raw: str, line_no: int,
              received_at: datetime) -> Parsed:
        values: dict[str, Any] = {}
        for fspec in kind.fields:
            values[fspec.canonical] = convert_text(
                fspec, fields, self.ctx, self.spec.leak_reference_c
            )
        return build_record(kind.record, values, self.ctx, self.label, raw, received_at, line_no)
