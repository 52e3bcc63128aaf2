"""Reading a serial profile: ``[serial]``, ``[[serial.requests]]``, ``[dialect]``, the line kinds.
"""

from __future__ import annotations

import codecs
import itertools
import re
from collections.abc import Mapping
from typing import Any

from gateway.profiles.checks import CHECKS
from gateway.profiles.load_fields import _NUMBER_KEYS, _condition, _fields, _number_text, _Reader
from gateway.profiles.load_trace import load_trace_line
from gateway.profiles.model import (
    Dialect,
    FixedColumn,
    FrameSpec,
    LineCheck,
    LineKind,
    NumberText,
    RequestSpec,
    SerialSpec,
)

__all__: list[str] = []




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
                      checksum=checksum, frame=frame, address_field=address_field,
                      trace=load_trace_line(r, doc, kind))


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
