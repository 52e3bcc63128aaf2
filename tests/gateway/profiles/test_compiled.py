"""The parser's once-per-station shortcuts decide exactly as the general code they stand in for.

``compile_text_field`` against ``convert_text`` (value or rejection text), the fixed-width
timestamp reader against CPython's ``datetime.strptime`` (the reference it replaces), the
resolved unit conversion against ``to_canonical`` bit for bit, over inputs chosen to sit on
every edge they test.
"""

from __future__ import annotations

import itertools
import math
from datetime import datetime, timedelta
from typing import Any, get_args

import pytest

from gateway.errors import UnitError
from gateway.profiles import StationContext, builtin_profiles, load_profile
from gateway.profiles.model import FieldSpec
from gateway.profiles.normalise import (
    FieldError,
    _fixed_time_reader,
    compile_text_field,
    convert_text,
)
from gateway.units import Kind, known_units, to_canonical, to_canonical_fn

CTX = StationContext("L1-S1", "L1", "Europe/Berlin", {1: "HX-210", 2: "HX-230"})

# Texts that sit on the edges of each converter: numbers the grammar refuses but float()
# accepts, out-of-range or oddly spaced dates, Unicode digits, codes in the wrong case.
TEXTS = [
    None, "", " ", "0", "-0", "+3", "1", "01", "-1", "1.5", ".5", "5.", "1e3", "1E-3", "1e999",
    "-1e999", "1e1000", "nan", "inf", "Infinity", "1_000", "0x10", " 3 ", "٣",
    "12345678901234567890",
    "ACC", "acc", "REJ", "GRS", "ABT", "OK", "NG", "GOOD", "BAD", "1", "2", "7", "HX-210",
    "2026-11-02 06:00:00", "2026-11-02T06:00:00", "2026-11-02T06:00:00Z", "2026-11-02 6:00:00",
    "2026-11-02  06:00:00", "2026-02-29 06:00:00", "2024-02-29 06:00:00", "2026-13-02 06:00:00",
    "2026-11-31 06:00:00", "2026-11-02 24:00:00", "2026-11-02 06:60:00", "2026-11-02 06:00:60",
    "2026-11-02 06:00:61", "0000-01-01 00:00:00", "٢٠٢٦-11-02 06:00:00", "2026-03-29 02:30:00",
    "2026-10-25 02:30:00", "02.12.26 07:15:09", "32.12.26 07:15:09", "1764658509", "-5",
]  # fmt: skip


def _outcome(fn: Any) -> tuple[str, Any]:
    try:
        value = fn()
    except FieldError as exc:
        return ("error", str(exc))
    # a Verdict member and its text are the same value for the record (StrEnum)
    return ("value", (type(value) if not isinstance(value, str) else str, value))


def _text_fields() -> list[tuple[str, FieldSpec, float]]:
    out = []
    for name in builtin_profiles():
        serial = load_profile(name).serial
        if serial is None:
            continue
        for kind in serial.dialect.kinds:
            for spec in kind.fields:
                out.append((f"{name}:{kind.record}.{spec.canonical}", spec,
                            serial.leak_reference_c))  # fmt: skip
    return out


@pytest.mark.parametrize(("where", "spec", "ref_c"), _text_fields(), ids=lambda v: str(v))
def test_compiled_field_matches_convert_text(where: str, spec: FieldSpec, ref_c: float) -> None:
    convert, _ = compile_text_field(spec, CTX, ref_c)
    assert spec.source is not None
    for text, unit in itertools.product(TEXTS, (None, "psi", "sccm", "furlong")):
        raw = {} if text is None else {spec.source: text}
        if spec.unit_from is not None and unit is not None:
            raw[spec.unit_from] = unit
        want = _outcome(lambda: convert_text(spec, raw, CTX, ref_c))  # noqa: B023
        got = _outcome(lambda: convert(raw.get(spec.source or ""), raw))  # noqa: B023
        assert got == want, (where, text, unit)


def test_compiled_field_keeps_per_line_errors_of_a_bad_zone_or_unit() -> None:
    bad_zone = FieldSpec("ended_at", "timestamp", source="t", time_format="%Y-%m-%d %H:%M:%S",
                         timezone="Mars/Olympus")  # fmt: skip
    bad_unit = FieldSpec("leak_rate_sccm", "leak", source="l", unit="furlong")
    for spec, text in ((bad_zone, "2026-11-02 06:00:00"), (bad_unit, "0.5")):
        convert, _ = compile_text_field(spec, CTX)
        raw = {spec.source or "": text}
        want = _outcome(lambda: convert_text(spec, raw, CTX))  # noqa: B023
        assert want[0] == "error"
        assert _outcome(lambda: convert(text, raw)) == want  # noqa: B023


FORMATS = ["%Y-%m-%d %H:%M:%S", "%d.%m.%Y %H:%M", "%Y%m%d%H%M%S", "%Y-%m-%dT%H:%M:%S",
           "%m/%d/%Y", "%Y-%m-%d"]  # fmt: skip


@pytest.mark.parametrize("fmt", FORMATS)
def test_fixed_time_reader_agrees_with_strptime(fmt: str) -> None:
    # Reference: CPython's datetime.strptime, which the reader stands in for.
    read = _fixed_time_reader(fmt)
    assert read is not None
    base = datetime(2026, 11, 2, 6, 7, 8)
    samples = {base.strftime(fmt), (base + timedelta(days=400, hours=17)).strftime(fmt)}
    for text in list(samples):  # every digit replaced: out-of-range and boundary values
        for i, ch in enumerate(text):
            if ch.isdigit():
                for d in "0123456789":
                    samples.add(text[:i] + d + text[i + 1 :])
        samples |= {text + "0", text[:-1], " " + text, text.replace("1", "١"), text.lower()}
    for text in sorted(samples):
        try:
            want: datetime | None = datetime.strptime(text, fmt)
        except ValueError:
            want = None
        args = read(text)
        if args is None:
            continue  # not the fixed form: the caller asks strptime itself
        try:
            got: datetime | None = datetime(*args)
        except ValueError:
            got = None
        assert got == want, text


@pytest.mark.parametrize("fmt", ["%y-%m-%d", "%Y-%m-%d %I:%M %p", "%Y-%j", "%H:%M:%S",
                                 "%Y-%m-%d\t%H", "%Y-%m-%d%%", "%Y1%m%d"])  # fmt: skip
def test_fixed_time_reader_declines_what_it_cannot_read_exactly(fmt: str) -> None:
    assert _fixed_time_reader(fmt) is None


@pytest.mark.parametrize("kind", get_args(Kind))
def test_resolved_unit_conversion_is_bit_identical(kind: Kind) -> None:
    values = [0.0, -0.0, 1.0, -1.0, 0.1, 350.02, 1e-300, 1e300, 6.163, 273.15, math.pi]
    for unit, ref_c in itertools.product(known_units(kind), (0.0, 20.0)):
        convert = to_canonical_fn(unit, kind, reference_c=ref_c)
        for v in values:
            want = to_canonical(v, unit, kind, reference_c=ref_c)
            assert math.copysign(1, convert(v)) == math.copysign(1, want)
            assert convert(v).hex() == want.hex(), (unit, ref_c, v)
    with pytest.raises(UnitError):
        to_canonical_fn("furlong", kind)
