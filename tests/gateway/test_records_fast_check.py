"""TestResult's one-expression check decides exactly as its detailed validator.

Every parsed line builds a TestResult, so the usual all-valid record is vouched for in one
expression; these cases sit on each edge of it (exact types vs subclasses, NaN/inf, -0.0,
bounds, naive and non-UTC times) and must give the same record or the same error as the
detailed checks alone.
"""

from __future__ import annotations

import math
from dataclasses import fields
from datetime import UTC, datetime, timedelta, timezone
from typing import Any
from zoneinfo import ZoneInfo

from gateway.records import TestResult, Verdict


class _Int(int):
    pass


class _Float(float):
    pass


_NOW = datetime(2026, 11, 2, 6, tzinfo=UTC)
_GOOD: dict[str, Any] = dict(
    station="L1-S1", line="L1", cycle=7, ended_at=_NOW, received_at=_NOW, program="HX-210",
    verdict=Verdict.PASS, test_pressure_pa=350e3, pressure_loss_pa=41.8, leak_rate_sccm=0.2,
    reject_limit_sccm=2.0, fill_s=3.0, stabilise_s=8.0, test_s=10.0, part_id="HX210-1",
    lower_limit_sccm=-1.0, temperature_c=22.4,
)  # fmt: skip
_EDGES: dict[str, list[Any]] = {
    "station": ["", "  ", "\u2003", 5, None],
    "part_id": ["", " ", None, 3],
    "program": ["", "\t"],
    "cycle": [0, -1, True, 1.0, _Int(3), 10**30],
    "ended_at": [datetime(2026, 1, 1), _NOW.astimezone(ZoneInfo("Europe/Berlin")),
                 _NOW.astimezone(timezone(timedelta(hours=-3))), "2026-01-01"],
    "verdict": ["pass", "PASS", "nope", Verdict.GROSS],
    "test_pressure_pa": [math.nan, math.inf, -math.inf, 1, True, _Float(1.0), -0.0, "1"],
    "reject_limit_sccm": [-1.0, -2.0, math.inf, 1],
    "lower_limit_sccm": [None, 2.0, 1.999, math.nan, -math.inf, 1],
    "fill_s": [-0.0, -1e-300, math.inf, 0, -1],
    "test_s": [math.nan, 0.0],
    "temperature_c": [None, math.nan, -273.15, 20],
    "reason": [None, 1, "late"],
    "raw": [b"x", "R;1"],
}  # fmt: skip


def _slow(values: dict[str, Any]) -> tuple[str, Any]:
    """The detailed validator alone, on an instance built without __post_init__."""
    obj = object.__new__(TestResult)
    defaults = {f.name: f.default for f in fields(TestResult)}
    for name, default in defaults.items():
        object.__setattr__(obj, name, values.get(name, default))
    try:
        obj._validate()
    except (ValueError, OverflowError) as exc:
        return ("error", f"{type(exc).__name__}: {exc}")
    return ("ok", tuple((getattr(obj, n), type(getattr(obj, n))) for n in defaults))


def test_result_fast_check_decides_like_the_detailed_validator() -> None:
    cases = [dict(_GOOD)]
    for name, edges in _EDGES.items():
        cases += [{**_GOOD, name: v} for v in edges]
    for values in cases:
        want = _slow(values)
        try:
            r = TestResult(**values)
        except (ValueError, OverflowError) as exc:
            got: tuple[str, Any] = ("error", f"{type(exc).__name__}: {exc}")
        else:
            got = ("ok", tuple((getattr(r, f.name), type(getattr(r, f.name)))
                               for f in fields(TestResult)))  # fmt: skip
        assert got == want, values
