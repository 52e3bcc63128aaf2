"""Where each value of a record came from, for ``profile check`` (pure).

An integrator who sees a wrong leak rate needs the raw text or registers behind it and what
the profile did to them (decimal comma, scale, unit, code table, bit). ``explain_fields``
answers that per canonical field, from the raw fields (columns, keys, regex groups) or the
register block the record was made of; values the record names in ``supplied`` are marked
as coming from the plant's config or the profile.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from dataclasses import dataclass

from gateway.profiles.model import FieldSpec, NumberText

__all__ = ["FieldOrigin", "explain_fields"]


@dataclass(frozen=True, slots=True)
class FieldOrigin:
    field: str  # canonical name
    raw: str  # the raw text, or registers as "@offset: hex words"
    applied: str  # what the profile did to it

    def to_dict(self) -> dict[str, str]:
        return {"raw": self.raw, "applied": self.applied}


_NUMERIC = ("int", "number", "pressure", "leak", "time", "temperature")


def _number(n: NumberText | None, kind: str, text: str | None) -> list[str]:
    """The number dialect's rules that this raw text actually needed."""
    if n is None or text is None:
        return []
    out = []
    if n.absent and text.strip() in n.absent:
        return [f"{text.strip()!r} = absent"]
    if kind not in _NUMERIC:
        return []
    if n.decimal != "." and n.decimal in text:
        out.append(f"decimal {n.decimal!r}")
    if n.thousands and n.thousands in text:
        out.append(f"thousands {n.thousands!r} dropped")
    if n.trailing_sign and text.rstrip().endswith("-"):
        out.append("sign after the digits")
    return out


def _register(fs: FieldSpec, regs: Sequence[int] | None) -> str:
    reg = fs.register
    assert reg is not None
    words = "" if regs is None else " ".join(
        f"{w:04X}" for w in regs[reg.at:reg.at + reg.width])
    return f"@{reg.at}: {words}".rstrip()


def _applied(fs: FieldSpec, raw: Mapping[str, str], value: object) -> str:
    parts: list[str] = []
    text = raw.get(fs.source or fs.canonical) if not fs.join else None
    reg = fs.register
    if reg is not None:
        orders = "" if reg.width != 2 else f" {reg.word_order} word first"
        if reg.byte_order != "big":
            orders += f" {reg.byte_order} bytes"
        parts.append(f"{reg.type}{orders}")
        if reg.bit is not None:
            parts.append(f"bit {reg.bit}")
        if reg.mask is not None:
            parts.append(f"mask 0x{reg.mask:04X}")
        if reg.null is not None:
            parts.append(f"{reg.null} = absent")
    parts += _number(fs.number, fs.kind, text)
    if fs.join:
        parts.append(f"{' + '.join(fs.join)} joined")
    if fs.scale != 1.0:
        parts.append(f"× {fs.scale:g}")
    if fs.offset:
        parts.append(f"+ {fs.offset:g}")
    if fs.unit_from is not None:
        parts.append(f"unit from {fs.unit_from} ({raw.get(fs.unit_from, '?')})")
    elif fs.unit is not None:
        parts.append(f"unit {fs.unit}")
    if fs.time_format is not None:
        zone = fs.timezone or "station's zone"
        parts.append(f"time {fs.time_format}, {zone}")
    if fs.bit_codes:
        parts.append("bits " + ", ".join(f"{b}→{v}" for b, v in fs.bit_codes) + " (first set wins)")
    elif fs.codes is not None:
        parts.append(f"code table → {value}")
    if fs.program_lookup and fs.canonical == "program":
        parts.append("program number → station's programs")
    return "; ".join(parts) or "as sent"


def explain_fields(
    fields: Sequence[FieldSpec],
    values: Mapping[str, object],
    supplied: Mapping[str, str],
    *,
    raw: Mapping[str, str] | None = None,
    registers: Sequence[int] | None = None,
) -> list[FieldOrigin]:
    """One origin per field of the record kind (``values``: the record's canonical values),
    plus one per value supplied from outside the station."""
    out: list[FieldOrigin] = []
    seen: set[str] = set()
    raw = raw or {}
    for fs in fields:
        seen.add(fs.canonical)
        value = values.get(fs.canonical)
        if fs.constant is not None:
            out.append(FieldOrigin(fs.canonical, "—", "constant in the profile"))
        elif fs.register is not None:
            out.append(FieldOrigin(fs.canonical, _register(fs, registers),
                                   _applied(fs, raw, value)))
        elif fs.join:
            text = " ".join(raw.get(n, "") for n in fs.join)
            out.append(FieldOrigin(fs.canonical, f"{'+'.join(fs.join)}={text!r}",
                                   _applied(fs, raw, value)))
        else:
            source = fs.source or fs.canonical
            got = raw.get(source)
            shown = f"{source}={got!r}" if got is not None else f"{source} (not sent)"
            out.append(FieldOrigin(fs.canonical, shown, _applied(fs, raw, value)))
    if values.get("time_source") == "gateway":
        out.append(FieldOrigin("ended_at", "—", "the gateway's receive time (the station "
                                                 "sends no time)"))
    for name, origin in sorted(supplied.items()):
        if name not in seen or origin == "config":
            where = "the plant's program sheet (gateway config)" if origin == "config" \
                else "the profile"
            out = [o for o in out if o.field != name]
            out.append(FieldOrigin(name, "—", f"supplied by {where}"))
    return out
