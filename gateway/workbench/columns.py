"""What a column of a capture looks like: numbers, dates, times, verdict codes, counters (pure).

``classify`` looks at every value a column took in a capture and says what it most likely
holds, with a confidence (the share of values that fit) and the details a profile needs: the
date format (day or month first, two- or four-digit year), the decimal mark and thousands
separator of its numbers, a sign after the digits, placeholder text for "no value", a unit
written after the number, the distinct codes of a verdict-like column.
"""

from __future__ import annotations

import itertools
import re
from collections import Counter
from collections.abc import Sequence
from dataclasses import dataclass, field
from datetime import datetime

__all__ = ["VERDICT_WORDS", "Column", "NumberStyle", "classify", "number_style"]

#: code words stations print, and the canonical verdict they usually mean (common practice)
VERDICT_WORDS: dict[str, str] = {
    "OK": "pass", "PASS": "pass", "ACC": "pass", "GOOD": "pass", "P": "pass", "IO": "pass",
    "NOK": "reject", "NG": "reject", "FAIL": "reject", "REJ": "reject", "LEAK": "reject",
    "F": "reject", "NIO": "reject", "BAD": "reject",
    "GROSS": "gross", "GRS": "gross", "G": "gross",
    "ABORT": "aborted", "ABT": "aborted", "STOP": "aborted", "A": "aborted", "ABORTED": "aborted",
}
_PLACEHOLDERS = ("---", "----", "--", "-----", "N/A", "n/a", "NA", "*", "****")
_DATE_FORMATS = ("%Y-%m-%d", "%d.%m.%Y", "%d.%m.%y", "%d/%m/%Y", "%d/%m/%y", "%m/%d/%Y",
                 "%m/%d/%y", "%Y/%m/%d", "%d-%m-%Y")
_TIME_FORMATS = ("%H:%M:%S", "%H:%M")
_DATETIME_FORMATS = (*(f"{d} {t}" for d in _DATE_FORMATS for t in _TIME_FORMATS),
                     "%Y-%m-%dT%H:%M:%S", "%Y-%m-%dT%H:%M:%SZ")
_UNIT_SUFFIX = re.compile(r"^([-+]?[\d.,]+(?:[eE][-+]?\d+)?-?)\s*([A-Za-z°\"/*·^0-9]+)$")
_KNOWN_UNITS = {"pa", "kpa", "mpa", "bar", "mbar", "psi", "psig", "sccm", "sccs", "ccm",
                "mbar*l/s", "mbarl/s", "pa*m3/s", "s", "ms", "min", "c", "°c", "k", "slm",
                "cc/min", "torr", "inh2o", "hpa", "atm"}


@dataclass(frozen=True, slots=True)
class NumberStyle:
    decimal: str = "."
    thousands: str = ""
    trailing_sign: bool = False
    exponent: bool = False


@dataclass
class Column:
    """What one raw column holds, as far as the capture tells."""

    name: str
    role: str  # "empty", "number", "integer", "date", "time", "datetime", "code", "text"
    confidence: float  # share of the non-empty values that fit the role
    values: list[str] = field(default_factory=list)
    empty_share: float = 0.0
    time_format: str | None = None
    style: NumberStyle = field(default_factory=NumberStyle)
    placeholders: tuple[str, ...] = ()
    unit: str | None = None  # a unit written after every number ("12.4 Pa")
    codes: tuple[str, ...] = ()  # the distinct values of a code-like column
    monotonic: bool = False  # integers that only grow (a cycle counter)
    distinct: int = 0

    @property
    def known_codes(self) -> tuple[str, ...]:
        return tuple(c for c in self.codes if c.upper() in VERDICT_WORDS)

    @property
    def verdict_like(self) -> bool:
        """Codes that are verdict words, one stray code allowed (a corrupted line)."""
        known = self.known_codes
        return self.role == "code" and len(known) >= 1 and len(self.codes) - len(known) <= 1 \
            and (len(known) >= 2 or len(self.codes) == 1)


def _fits(text: str, fmt: str) -> bool:
    try:
        datetime.strptime(text, fmt)
    except ValueError:
        return False
    return True


def _time_format(values: Sequence[str], formats: Sequence[str]) -> tuple[str | None, float]:
    """The format most values fit; day-first beats month-first only where the data decide
    (a first field above 12), else the more common day-first is assumed (common practice
    outside North America; the draft says so)."""
    best, share = None, 0.0
    for fmt in formats:
        hits = sum(1 for v in values if _fits(v, fmt))
        if hits / len(values) > share:
            best, share = fmt, hits / len(values)
    return best, share


def number_style(values: Sequence[str]) -> NumberStyle | None:
    """The decimal mark, thousands separator and sign position all ``values`` agree on."""
    comma = any(re.fullmatch(r"[-+]?\d*,\d+(?:[eE][-+]?\d+)?-?", v) for v in values)
    point_thousands = any(re.fullmatch(r"[-+]?\d{1,3}(?:\.\d{3})+(?:,\d+)?-?", v) for v in values)
    decimal = "," if comma or (point_thousands and any("," in v for v in values)) else "."
    thousands = "." if decimal == "," and any(
        re.fullmatch(r"[-+]?\d{1,3}(?:\.\d{3})+(?:,\d*)?(?:[eE][-+]?\d+)?-?", v)
        for v in values) else ""
    trailing = any(re.fullmatch(r"[\d.,]+(?:[eE][-+]?\d+)?-", v) for v in values)
    exponent = any(re.search(r"\d[eE][-+]?\d", v) for v in values)
    style = NumberStyle(decimal, thousands, trailing, exponent)
    fits = sum(1 for v in values if _is_number(v, style))
    # one corrupted value in a capture of several lines does not make a column text
    return style if fits == len(values) or (len(values) >= 4 and fits >= 0.75 * len(values)) \
        else None


def _is_number(text: str, style: NumberStyle) -> bool:
    t = text.strip()
    if style.trailing_sign and t.endswith("-"):
        t = "-" + t[:-1]
    if style.thousands:
        t = t.replace(style.thousands, "")
    if style.decimal != ".":
        t = t.replace(style.decimal, ".")
    return re.fullmatch(r"[-+]?(?:\d+\.?\d*|\.\d+)(?:[eE][-+]?\d+)?", t) is not None


def classify(name: str, raw: Sequence[str]) -> Column:
    values = [v.strip() for v in raw]
    present = [v for v in values if v]
    col = Column(name=name, role="empty", confidence=1.0, values=values,
                 empty_share=1 - len(present) / len(values) if values else 1.0,
                 distinct=len(set(present)))
    if not present:
        return col
    placeholders = tuple(sorted({v for v in present if v in _PLACEHOLDERS}))
    data = [v for v in present if v not in placeholders]
    col.placeholders = placeholders
    if not data:
        col.role = "empty"
        return col
    # a unit after every number: "12.4 Pa"
    split = [_UNIT_SUFFIX.match(v) for v in data]
    if all(split) and len({m.group(2) for m in split if m}) == 1:
        unit = split[0].group(2) if split[0] else None
        if unit is not None and unit.lower() in _KNOWN_UNITS:
            col.unit = unit
            data = [m.group(1) for m in split if m]
    for role, formats in (("datetime", _DATETIME_FORMATS), ("date", _DATE_FORMATS),
                          ("time", _TIME_FORMATS)):
        fmt, share = _time_format(data, formats)
        if fmt is not None and share >= 0.75:  # a capture may hold a corrupted line
            col.role, col.time_format, col.confidence = role, fmt, share
            return col
    style = number_style(data)
    if style is not None:
        integers = all(re.fullmatch(r"\d+", v) for v in data if _is_number(v, style))
        col.role = "integer" if integers else "number"
        col.style = style
        if integers:
            numbers = [int(v) for v in data if re.fullmatch(r"\d+", v)]
            # a counter: distinct, and growing from line to line (a capture may hold a line
            # out of order or a repeat: most steps up is enough)
            ups = sum(1 for a, b in itertools.pairwise(numbers) if b > a)
            col.monotonic = len(numbers) > 2 and len(set(numbers)) == len(numbers) and \
                ups >= 0.7 * (len(numbers) - 1)
        return col
    counts = Counter(data)
    known = sum(1 for c in counts if c.upper() in VERDICT_WORDS) >= len(counts) - 1 >= 1
    if (len(counts) <= max(2, min(6, len(data) // 2)) or (known and len(counts) <= 6)) and all(
            re.fullmatch(r"[A-Za-z][\w-]{0,15}", c) for c in counts):
        col.role = "code"
        col.codes = tuple(sorted(counts))
        col.confidence = 1.0
        return col
    col.role = "text"
    return col
