"""A first profile from a serial capture: what can be read off the bytes, and what cannot (pure).

``draft_profile`` looks at a capture the way an integrator would: the line end, a check value
at the end of each line or a frame around each record, the separator (or key/value pairs), a
header row, which lines are results and which calibrations (a tag in the first field, or a
different number of fields), and per column: numbers with their decimal mark, dates and times
with their format, verdict-like codes, a growing counter, units written in the data. It writes
a commented TOML profile with each guess and how sure it is. What a capture cannot tell (which
number is the leak rate, in which unit; what to send to a station that must be asked) is left
as a marked choice: the person fills those in, then runs ``leakfleet profile check``.
"""

from __future__ import annotations

import re
from collections import Counter
from collections.abc import Sequence
from dataclasses import dataclass, field
from typing import Any

from gateway.profiles.checks import CHECKS
from gateway.workbench.columns import VERDICT_WORDS, Column, NumberStyle, classify
from gateway.workbench.text import readability

__all__ = ["Draft", "draft_profile"]

_SEPARATORS = (";", "\t", "|", ",", " ")
_NUMBER_ROLES = ("leak_rate_sccm", "pressure_loss_pa", "test_pressure_pa", "reject_limit_sccm",
                 "lower_limit_sccm", "fill_s", "stabilise_s", "test_s", "temperature_c")
_ADDRESS_KEYS = ("ADR", "ADDR", "ADDRESS", "STATION")
_CAL_ROLES = ("master_loss_pa", "standard_loss_pa", "standard_sccm", "standard_ref_pressure_pa")


@dataclass
class Draft:
    toml: str
    notes: list[str] = field(default_factory=list)  # what was decided, and how sure
    choices: list[str] = field(default_factory=list)  # what the person must fill in

    def to_json(self) -> dict[str, Any]:
        return {"toml": self.toml, "notes": self.notes, "choices": self.choices}


@dataclass
class _Kind:
    record: str  # "result" or "calibration" (a guess)
    lines: list[list[str]]
    names: list[str]
    when: str | None  # TOML inline table
    columns: list[Column] = field(default_factory=list)


def _q(text: str) -> str:
    """A TOML basic string."""
    out = []
    for ch in text:
        if ch in '"\\':
            out.append("\\" + ch)
        elif ord(ch) < 0x20 or ord(ch) == 0x7F:
            out.append({"\r": "\\r", "\n": "\\n", "\t": "\\t"}.get(ch, f"\\u{ord(ch):04X}"))
        else:
            out.append(ch)
    return '"' + "".join(out) + '"'


def _terminator(data: bytes) -> str:
    crlf = data.count(b"\r\n")
    lf, cr = data.count(b"\n") - crlf, data.count(b"\r") - crlf
    return "\r\n" if crlf >= max(lf, cr) else "\n" if lf >= cr else "\r"


def _line_check(lines: Sequence[str]) -> tuple[str, str] | None:
    """A check value after a marker at the end of each line: (algorithm, marker)."""
    for marker in (" *", "*", ";", " "):
        parts = [line.rpartition(marker) for line in lines]
        tails = [t for _, m, t in parts if m]
        if len(tails) < 0.8 * len(lines) or not all(re.fullmatch(r"[0-9A-Fa-f]{2,4}", t)
                                                   for t in tails):
            continue
        for name, (fn, digits) in CHECKS.items():
            hits = sum(1 for p, m, t in parts if m and len(t) == digits
                       and int(t, 16) == fn(p.encode("latin-1")))
            if hits >= 0.6 * len(lines):
                return name, marker
    return None


def _frame_check(frames: Sequence[list[str]], eol: str) -> str | None:
    for name, (fn, digits) in CHECKS.items():
        hits = 0
        for lines in frames:
            last = lines[-1]
            cut = last.find("\x03")
            body = eol.join([lines[0][1:], *lines[1:-1], last[:cut]]) + "\x03"
            value = last[cut + 1:].strip()
            if len(value) == digits and re.fullmatch(r"[0-9A-Fa-f]+", value) and \
                    int(value, 16) == fn(body.encode("latin-1")):
                hits += 1
        if hits >= 0.6 * len(frames):
            return name
    return None


def _separator(lines: Sequence[str]) -> tuple[str, float]:
    best, score = ";", -1.0
    for sep in _SEPARATORS:
        counts = Counter(len(line.split(sep)) for line in lines)
        useful = sum(n for c, n in counts.items() if c >= 3) / len(lines)
        # few distinct shapes; a space only if nothing else splits the lines
        value = useful - 0.05 * (len(counts) - 1) - (0.2 if sep == " " else 0)
        if value > score:
            best, score = sep, value
    return best, max(0.0, min(1.0, score))


def _name(text: str, i: int, used: set[str]) -> str:
    base = re.sub(r"[^a-z0-9_]", "_", text.strip().lower()).strip("_") or f"c{i + 1}"
    if base[0].isdigit():
        base = f"c_{base}"
    name, n = base, 2
    while name in used:
        name, n = f"{base}_{n}", n + 1
    used.add(name)
    return name


def _header(first: list[str], rest: Sequence[list[str]]) -> bool:
    same = [r for r in rest if len(r) == len(first)]
    if not same or any(re.search(r"\d", f) for f in first):
        return False
    return any(re.fullmatch(r"[-+]?[\d.,]+", v.strip()) for r in same[:20] for v in r)


def _kinds(rows: list[list[str]], header: list[str] | None) -> list[_Kind]:
    tags = Counter(r[0] for r in rows)
    top = [t for t, _ in tags.most_common(2)]
    # a tag: the first field is a short word on (nearly) every line, two words at most
    tagged = len(rows) >= 2 and all(re.fullmatch(r"[A-Za-z]{1,4}", t) for t in top) and \
        sum(tags[t] for t in top) >= 0.75 * len(rows)
    groups: dict[Any, list[list[str]]] = {}
    for r in rows:
        if tagged and r[0] not in top:
            continue  # noise with another first field: not a kind of its own
        groups.setdefault(r[0] if tagged else len(r), []).append(r)
    ordered = sorted(groups.items(), key=lambda kv: -len(kv[1]))
    kinds = []
    for rank, (key, lines) in enumerate(ordered[:2]):
        width = max(len(r) for r in lines)
        used: set[str] = set()
        if header is not None and len(header) == width:
            names = [_name(h, i, used) for i, h in enumerate(header)]
        else:
            names = [_name("tag" if tagged and i == 0 else f"c{i + 1}", i, used)
                     for i in range(width)]
        when = (f"{{ field = {_q(names[0])}, equals = {_q(str(key))} }}" if tagged
                else f"{{ fields = {key} }}")
        kind = _Kind("result" if rank == 0 else "calibration", lines, names, when)
        kind.columns = [classify(n, [r[i] if i < len(r) else "" for r in lines])
                        for i, n in enumerate(names)]
        kinds.append(kind)
    return _order(kinds)


def _order(kinds: list[_Kind]) -> list[_Kind]:
    """The result kind is the one with a verdict column of more than one canonical verdict (a
    calibration says only OK or not); else the more frequent."""
    def score(k: _Kind) -> int:
        v = _verdict(k)
        return 0 if v is None else len({VERDICT_WORDS[c.upper()] for c in v.known_codes})
    if len(kinds) == 2 and score(kinds[1]) > score(kinds[0]):
        kinds[0].record, kinds[1].record = "calibration", "result"
        kinds.reverse()
    return kinds


def _verdict(kind: _Kind) -> Column | None:
    for col in kind.columns:
        if col.verdict_like and {VERDICT_WORDS[c.upper()] for c in col.known_codes} & {
                "pass", "reject"}:
            return col
    return None


def _style(columns: Sequence[Column]) -> tuple[NumberStyle, tuple[str, ...]]:
    nums = [c for c in columns if c.role in ("number", "integer")]
    decimal = "," if any(c.style.decimal == "," for c in nums) else "."
    thousands = next((c.style.thousands for c in nums if c.style.thousands), "")
    trailing = any(c.style.trailing_sign for c in nums)
    absent = tuple(sorted({p for c in columns for p in c.placeholders}))
    return NumberStyle(decimal, thousands, trailing), absent


def _fields(kind: _Kind, notes: list[str], choices: list[str]) -> list[str]:
    out: list[str] = []
    cols = kind.columns
    taken: set[str] = set()
    verdict = _verdict(kind) if kind.record == "result" else None
    if verdict is not None:
        codes = ", ".join(f"{c} = {_q(VERDICT_WORDS[c.upper()])}" for c in verdict.known_codes)
        odd = sorted(set(verdict.codes) - set(verdict.known_codes))
        out.append(f"verdict = {{ from = {_q(verdict.name)}, codes = {{ {codes} }} }}"
                   "  # codes as usually meant: check them")
        if odd:
            out.append(f"# {', '.join(odd)}: not a verdict word; add it to codes if the station "
                       "means one")
        taken.add(verdict.name)
        notes.append(f"{kind.record}: verdict from {verdict.name!r} "
                     f"(codes {', '.join(verdict.codes)})")
    stamp = next((c for c in cols if c.role == "datetime"), None)
    date = next((c for c in cols if c.role == "date"), None)
    clock = next((c for c in cols if c.role == "time"), None)
    if stamp is not None:
        # ISO 8601 with a zone ("...Z", "+01:00") is read with its zone, not the station's
        iso = (stamp.time_format or "").endswith("Z") or "T" in (stamp.time_format or "")
        fmt = '"iso"' if iso else _q(stamp.time_format or "")
        out.append(f"ended_at = {{ from = {_q(stamp.name)}, format = {fmt} }}"
                   "  # the station's local time (gateway config timezone)")
        taken.add(stamp.name)
        notes.append(f"{kind.record}: time from {stamp.name!r}, format {stamp.time_format}")
    elif date is not None and clock is not None:
        fmt = f"{date.time_format} {clock.time_format}"
        joined = f"[{_q(date.name)}, {_q(clock.name)}]"
        out.append(f"ended_at = {{ from = {joined}, format = {_q(fmt)} }}")
        taken |= {date.name, clock.name}
        notes.append(f"{kind.record}: date {date.name!r} + time {clock.name!r}, format {fmt}"
                     + (" (day first assumed: no day above 12 in the capture)"
                        if "%d" in fmt and "%m" in fmt else ""))
    else:
        notes.append(f"{kind.record}: no date/time column: records will take the gateway's "
                     "receive time")
    if kind.record == "result":
        counters = [c for c in cols if c.role == "integer" and c.monotonic and c.name not in taken]
        if counters:
            out.append(f"cycle = {_q(counters[0].name)}  # grows by one per test")
            taken.add(counters[0].name)
            notes.append(f"result: cycle counter {counters[0].name!r}")
        else:
            fallback = next((c for c in cols if c.role == "integer" and c.name not in taken
                             and c.distinct == len([v for v in c.values if v])), None)
            choices.append("result: cycle (no column grows steadily in the capture)")
            if fallback is not None:
                out.append(f"cycle = {_q(fallback.name)}  # CHOICE: a GUESS (distinct "
                           "integers, not steadily growing here): the column that counts tests")
                taken.add(fallback.name)
            else:
                out.append('# cycle = "?"  # REQUIRED: the column that counts tests')
        parts = [c for c in cols if c.role == "text" and c.distinct > 1
                 and c.name not in taken and any(ch.isdigit() for v in c.values for ch in v)]
        if parts:
            out.append(f"part_id = {_q(parts[0].name)}  # many distinct ids: looks like a part id")
            taken.add(parts[0].name)
    if kind.record == "calibration":
        passed = next((c for c in cols if c.role == "code" and c.name not in taken and all(
            VERDICT_WORDS.get(x.upper()) in ("pass", "reject") for x in c.codes)), None)
        if passed is not None:
            codes = ", ".join(f"{c} = {'true' if VERDICT_WORDS[c.upper()] == 'pass' else 'false'}"
                              for c in passed.codes)
            out.append(f"passed = {{ from = {_q(passed.name)}, codes = {{ {codes} }} }}")
            taken.add(passed.name)
    skip = {"tag", *(re.findall(r'field = "([^"]+)"', kind.when or "")),
            *(c.name for c in cols if c.name.upper() in _ADDRESS_KEYS)}
    programs = [c for c in cols if c.name not in taken and c.name not in skip
                and c.role in ("code", "integer", "text") and 1 <= c.distinct <= 8
                and not c.monotonic and not c.verdict_like and c.empty_share < 0.5]
    if programs:
        hint = programs[0]
        numbered = hint.role == "integer"
        seen = ", ".join(sorted({v for v in hint.values if v})[:4])
        lookup = ", programs = true" if numbered else ""
        out.append(f"# program = {{ from = {_q(hint.name)}{lookup} }}"
                   f"  # CHOICE: few distinct values ({seen})")
        choices.append(f"{kind.record}: program (candidate {hint.name!r})")
    numbers = [c for c in cols if c.role in ("number", "integer") and c.name not in taken
               and c.name.upper() not in _ADDRESS_KEYS]
    roles: tuple[str, ...] = _NUMBER_ROLES if kind.record == "result" else _CAL_ROLES
    if kind.record == "calibration" and len(numbers) >= 2:
        # the two losses are required: a guess by position lets 'profile check' run at once
        for role, col in zip(("master_loss_pa", "standard_loss_pa"), numbers, strict=False):
            out.append(f"{role} = {{ from = {_q(col.name)}, unit = \"Pa\" }}  # CHOICE: a GUESS "
                       "by position: check the column and the unit")
            taken.add(col.name)
        numbers = numbers[2:]
        roles = roles[2:]
    if numbers:
        menu = ", ".join(f"{c.name}" + (f" [{c.unit}]" if c.unit else "") for c in numbers)
        out.append(f"# CHOICE: which number is which? columns: {menu}")
        for role in roles[:4] if kind.record == "result" else roles:
            unit = {"sccm": "sccm", "pa": "Pa", "s": "s", "c": "C"}[role.rsplit("_", 1)[1]]
            out.append(f"# {role} = {{ from = \"?\", unit = \"{unit}?\" }}")
        choices.append(f"{kind.record}: roles of the numbers ({menu}) and their units")
    return out


def _dialect(sep: str, style: NumberStyle, absent: Sequence[str], kv: bool = False) -> list[str]:
    out = ["[dialect]", f"kind = {_q('keyvalue' if kv else 'delimited')}",
           f"separator = {_q(sep)}"]
    if kv:
        out.append('unknown_keys = "ignore"  # CHOICE: "reject" once every key is mapped, so noise '
                   "that looks like a pair is never taken")
    if style.decimal != ".":
        out.append(f"decimal = {_q(style.decimal)}")
    if style.thousands:
        out.append(f"thousands = {_q(style.thousands)}")
    if style.trailing_sign:
        out.append('sign = "trailing"  # negative numbers end in "-"')
    if absent:
        shown = _q(absent[0]) if len(absent) == 1 else "[" + ", ".join(map(_q, absent)) + "]"
        out.append(f"absent = {shown}  # placeholder for a value the test does not have")
    return out


def draft_profile(data: bytes, name: str = "my-station") -> Draft:
    """A commented starting profile for the station that sent ``data``; ValueError (one line)
    for a capture that is empty or not text."""
    if not data.strip():
        raise ValueError("the capture is empty: nothing to learn from")
    score = readability(data)
    if score.score < 0.6:
        raise ValueError(f"the capture is not text ({score.text_share:.0%} readable bytes): "
                         "wrong baud rate or parity? try 'leakfleet capture ENDPOINT --try'")
    eol = _terminator(data)
    text = data.decode("latin-1")
    lines = [ln for ln in re.split(r"\r\n|\n|\r", text) if ln.strip()]
    notes = [f"line end {eol!r}; {len(lines)} lines"]
    choices: list[str] = []
    head = ["# Draft profile from a capture by 'leakfleet profile draft': check every guess,",
            "# fill in each CHOICE, then: leakfleet profile check THIS.toml CAPTURE",
            "[profile]", f"name = {_q(name)}", 'version = "0.1"',
            'description = "drafted from a capture"', 'transport = "serial"', "", "[serial]"]
    if sum(1 for ln in lines if ln.startswith("\x02")) >= 1:
        return _framed(lines, eol, head, notes, choices)
    pairs = sum(1 for ln in lines if re.fullmatch(r"[A-Za-z]\w{0,15}[=:].*", ln.strip()))
    if pairs >= 0.6 * len(lines):
        return _keyvalue(lines, eol, head, notes, choices)
    check = _line_check(lines)
    serial = ['mode = "stream"', f"terminator = {_q(eol)}"]
    if check is not None:
        algorithm, marker = check
        serial.append(f"checksum = {{ algorithm = {_q(algorithm)}, marker = {_q(marker)} }}")
        notes.append(f"a {algorithm} check value after {marker!r} on each line")
        lines = [ln.rpartition(marker)[0] for ln in lines]
    sep, sure = _separator(lines)
    notes.append(f"separator {sep!r} ({sure:.0%} sure)")
    rows = [[f.strip() for f in ln.split(sep)] for ln in lines]
    header = None
    if _header(rows[0], rows[1:]):
        header = rows[0]
        rows = rows[1:]
        notes.append("first line is a header: column names taken from it (it will be rejected "
                     "as a record, which is harmless)")
    kinds = _kinds(rows, header)
    style, absent = _style([c for k in kinds for c in k.columns])
    out = head + serial + ["", *_dialect(sep, style, absent)]
    for kind in kinds:
        out += ["", f"[{kind.record}]", f"when = {kind.when}",
                "columns = [" + ", ".join(map(_q, kind.names)) + "]", "",
                f"[{kind.record}.fields]", *_fields(kind, notes, choices)]
    if len(kinds) == 1:
        notes.append("one kind of line only: no calibration lines in the capture")
    return Draft("\n".join(out) + "\n", notes, choices)


def _blocks(lines: Sequence[str]) -> tuple[list[list[str]], str | None, str | None]:
    """Answer blocks of a request/response capture, cut at a recurring end line."""
    counts = Counter(ln.strip() for ln in lines if not re.search(r"[=:]", ln))
    end = next((t for t, n in counts.most_common() if n >= 2 and re.fullmatch(r"[A-Z]{2,8}", t)),
               None)
    empty = next((t for t, n in counts.most_common() if t != end and n >= 1
                  and re.fullmatch(r"[A-Z]{2,8}", t)), None)
    blocks: list[list[str]] = []
    cur: list[str] = []
    for ln in lines:
        if end is not None and ln.strip() == end:
            if cur:
                blocks.append(cur)
            cur = []
        elif ln.strip() != empty:
            cur.append(ln)
    if cur:
        blocks.append(cur)
    return blocks, end, empty


def _kv_kinds(blocks: Sequence[list[str]], sep: str) -> list[_Kind]:
    parsed = [dict((k.strip(), v.strip()) for k, _, v in (ln.partition(sep) for ln in b))
              for b in blocks]
    keys = Counter(k for p in parsed for k in p)
    # a tag: a key on (nearly) every block whose value is one of two or three words
    tag = next((k for k in keys if keys[k] >= 0.75 * len(parsed)
                and len({p[k] for p in parsed if k in p}) in (2, 3)
                and all(re.fullmatch(r"[A-Za-z]{2,8}", p[k]) for p in parsed if k in p)), None)
    groups: dict[str, list[dict[str, str]]] = {}
    for p in parsed:
        if tag is not None and tag not in p:
            continue  # a block without the tag (noise, a cut answer): no kind of its own
        groups.setdefault(p.get(tag, "") if tag else "", []).append(p)
    kinds = []
    for rank, (value, items) in enumerate(sorted(groups.items(), key=lambda kv: -len(kv[1]))[:2]):
        names = list(dict.fromkeys(k for p in items for k in p if k != tag))
        when = f"{{ field = {_q(tag)}, equals = {_q(value)} }}" if tag else None
        kind = _Kind("result" if rank == 0 else "calibration", [], names, when)
        kind.columns = [classify(n, [p.get(n, "") for p in items]) for n in names]
        kinds.append(kind)
    return _order(kinds)


def _kv_tail(kinds: Sequence[_Kind], notes: list[str], choices: list[str]) -> list[str]:
    out: list[str] = []
    for kind in kinds:
        out += ["", f"[{kind.record}]"] + ([f"when = {kind.when}"] if kind.when else []) + [
            "", f"[{kind.record}.fields]", *_fields(kind, notes, choices)]
        units = [c for c in kind.columns if c.role == "code" and all(
            u.lower() in ("pa", "kpa", "psi", "mbar", "bar", "sccm", "sccs", "mbar*l/s")
            for u in c.codes)]
        for u in units:
            out.append(f"# {u.name} holds units ({', '.join(u.codes)}): "
                       f"use unit_from = {_q(u.name)}")
    return out


def _keyvalue(lines: Sequence[str], eol: str, head: list[str], notes: list[str],
              choices: list[str]) -> Draft:
    sep = "=" if sum("=" in ln for ln in lines) >= sum(":" in ln for ln in lines) else ":"
    blocks, end, empty = _blocks(lines)
    notes.append(f"key{sep}value lines in {len(blocks)} answer block(s)"
                 + (f" ending with {end!r}" if end else ""))
    choices.append("serial.requests: the query that asks the station (not in a capture)")
    kinds = _kv_kinds(blocks, sep)
    style, absent = _style([c for k in kinds for c in k.columns])
    request = ["[[serial.requests]]", 'query = "?\\r"  # CHOICE: what the gateway sends to ask']
    if end:
        request.append(f"end_line = {_q(end)}")
    if empty:
        request.append(f"empty = {_q(empty)}  # the answer when there is nothing yet")
    out = [*head, 'mode = "request"', f"terminator = {_q(eol)}", "", *request, "",
           *_dialect(sep, style, absent, kv=True), *_kv_tail(kinds, notes, choices)]
    return Draft("\n".join(out) + "\n", notes, choices)


def _framed(lines: Sequence[str], eol: str, head: list[str], notes: list[str],
            choices: list[str]) -> Draft:
    frames: list[list[str]] = []
    cur: list[str] | None = None
    loose = []
    for ln in lines:
        if ln.startswith("\x02"):
            cur = [ln]
        elif cur is not None:
            cur.append(ln)
        else:
            loose.append(ln)
        if cur is not None and "\x03" in ln:
            frames.append(cur)
            cur = None
    check = _frame_check(frames, eol)
    notes.append(f"{len(frames)} frame(s) STX..ETX" + (f" with a {check} block check"
                                                      if check else " without a check"))
    inner = [[*([f[0][1:]] if f[0][1:].strip() else []), *f[1:-1],
              *([f[-1][:f[-1].find("\x03")]] if f[-1].find("\x03") > 0 else [])] for f in frames]
    flat = [ln for b in inner for ln in b]
    sep = " " if sum(bool(re.fullmatch(r"[A-Z]\w* .+", ln)) for ln in flat) >= 0.6 * len(flat) \
        else "="
    kinds = _kv_kinds(inner, sep)
    style, absent = _style([c for k in kinds for c in k.columns])
    tail = f", check = {_q(check)}" if check else ""
    frame = f'frame = {{ start = "\\u0002", end = "\\u0003"{tail} }}'
    addr = next((c.name for k in kinds for c in k.columns if c.name.upper() in _ADDRESS_KEYS),
                None)
    serial = [f"terminator = {_q(eol)}", frame]
    if addr:
        serial.append(f"address_field = {_q(addr)}  # echoes the station's address")
    nak = next((ln for ln in loose if ln.strip() in ("\x15", "NAK", "NONE")), None)
    if loose:
        notes.append(f"{len(loose)} line(s) outside frames" + (f" (e.g. {loose[0]!r})"))
        choices.append("serial.mode: a station that answers queries is 'request' (then add the "
                       "query); one that prints on its own is 'stream'")
        request = ["", "[[serial.requests]]",
                   'query = "?\\r"  # CHOICE: what the gateway sends to ask ({address} for a '
                   "shared line)"] + ([f"empty = {_q(nak)}"] if nak else [])
        mode = 'mode = "request"  # answers and an empty marker were seen: a station asked'
    else:
        request, mode = [], 'mode = "stream"'
    out = [*head, mode, *serial, *request, "", *_dialect(sep, style, absent, kv=True),
           *_kv_tail(kinds, notes, choices)]
    return Draft("\n".join(out) + "\n", notes, choices)
