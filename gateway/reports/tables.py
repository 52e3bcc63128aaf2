"""Plain-text rendering: percentages, numbers and padded tables."""

from __future__ import annotations

import math
from collections.abc import Iterable, Sequence
from typing import Any


def pct(value: float | None, digits: int = 1) -> str:
    return (
        "–"
        if value is None or (isinstance(value, float) and math.isnan(value))
        else f"{100 * value:.{digits}f} %"
    )


def num(value: float | None, fmt: str = ".4g") -> str:
    return (
        "–"
        if value is None or (isinstance(value, float) and math.isnan(value))
        else format(value, fmt)
    )


def table(headers: Sequence[str], rows: Iterable[Sequence[Any]]) -> str:
    """Plain-text table with columns padded to their widest cell."""
    body = [[str(c) for c in row] for row in rows]
    widths = [
        max(len(h), *(len(r[i]) for r in body)) if body else len(h) for i, h in enumerate(headers)
    ]
    line = "  ".join(h.ljust(w) for h, w in zip(headers, widths, strict=True))
    out = [line, "  ".join("-" * w for w in widths)]
    out += ["  ".join(c.ljust(w) for c, w in zip(r, widths, strict=True)) for r in body]
    return "\n".join(line.rstrip() for line in out)
