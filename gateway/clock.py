"""The gateway's clock: when a record was received, a gap found, a conflict seen.

The wall clock, except in ``leakfleet demo``, whose simulated plant runs faster than real
time: there the gateway lives on the plant's clock (``use_clock``), so receipt stamps and the
stations' own stamps agree and no station looks as if its clock ran hours ahead.
"""

from __future__ import annotations

import contextlib
from collections.abc import Callable, Iterator
from datetime import UTC, datetime

__all__ = ["use_clock", "utcnow"]


def _wall() -> datetime:
    return datetime.now(UTC)


_clock: Callable[[], datetime] = _wall


def utcnow() -> datetime:
    """Now, time-zone aware (UTC)."""
    return _clock()


@contextlib.contextmanager
def use_clock(clock: Callable[[], datetime]) -> Iterator[None]:
    """Run the gateway on ``clock`` (a simulated plant's) until the block ends."""
    global _clock
    before, _clock = _clock, clock
    try:
        yield
    finally:
        _clock = before
