"""One outcome of ``profile check``: where in the sample, the record or the reason, and where
each of the record's values came from (shared by the text, dump and image checks)."""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from dataclasses import dataclass

from gateway.profiles.explain import FieldOrigin, explain_fields
from gateway.profiles.model import FieldSpec, Parsed
from gateway.records import PressureTrace, Rejected

__all__ = ["Entry", "FieldOrigin", "_origins"]


@dataclass(frozen=True, slots=True)
class Entry:
    """One outcome: where in the sample it came from, and the record, rejection or value."""

    line_no: int
    where: str
    item: Parsed | None = None
    note: str = ""  # counters and state (no record)
    origins: tuple[FieldOrigin, ...] = ()  # where each value of an accepted record came from


def _origins(fields: Sequence[FieldSpec], item: Parsed, *, raw: Mapping[str, str] | None = None,
             registers: Sequence[int] | None = None) -> tuple[FieldOrigin, ...]:
    if isinstance(item, Rejected | PressureTrace):
        return ()
    values = item.to_dict()
    return tuple(explain_fields(fields, values, dict(item.supplied), raw=raw,
                                registers=registers))
