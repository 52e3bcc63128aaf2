"""``profile check`` of a register image (what ``leakfleet probe modbus --dump`` wrote).

A probe dump holds the registers a station showed at one or more moments, not records. The
profile says where the records are: this reads each snapshot the way the gateway's reader
would (the counter, then the ring slots it still holds, newest first; or the single
last-result block with its bits) and decodes what it finds, once per record. Registers the
profile needs but the probe did not read are named, so the person knows which --range to add.
"""

from __future__ import annotations

import json
from datetime import datetime
from typing import Any

from gateway.errors import ConfigError, DecodeError
from gateway.profiles.decoders import ModbusDecoder
from gateway.profiles.entries import Entry, _origins
from gateway.profiles.model import Decoded, Profile, StationContext

__all__ = ["check_image", "is_image"]

_TABLE = {3: "holding", 4: "input", 1: "coils", 2: "discrete"}


def is_image(doc: Any) -> bool:
    return isinstance(doc, dict) and doc.get("format") == "leakfleet-register-dump"


def check_image(profile: Profile, doc: dict[str, Any], ctx: StationContext,
                received_at: datetime, file: str = "sample") -> list[Any]:
    from gateway.workbench.dump import dump_from_json

    spec = profile.modbus
    assert spec is not None
    try:
        dump = dump_from_json(json.dumps(doc))
    except ValueError as exc:
        raise ConfigError(f"{file}: {exc}") from None
    decoder = ModbusDecoder(spec)
    table = _TABLE[spec.function]
    out: list[Entry] = []
    seen: set[str] = set()

    def regs(values: dict[tuple[str, int], int], start: int, count: int, name: str = table
             ) -> list[int] | None:
        words = [values.get((name, a)) for a in range(start, start + count)]
        if any(w is None for w in words):
            return None
        return [int(w) for w in words if w is not None]

    def missing(i: int, what: str, start: int, count: int, name: str = table) -> None:
        out.append(Entry(0, f"snapshot {i}", None, f"{what}: {name} registers "
                         f"{start}..{start + count - 1} are not in the dump (probe them)"))

    def add(i: int, where: str, item: Decoded, fields: Any, words: list[int]) -> None:
        key = getattr(item, "record_id", None) or f"{item.raw}"
        if key in seen:
            return
        seen.add(key)
        out.append(Entry(i, f"snapshot {i} {where}", item,
                         origins=_origins(fields, item, registers=words)))

    ring = spec.result
    for i, snap in enumerate(dump.snapshots, start=1):
        values = dict(snap.values)
        latest = spec.latest
        if latest is not None:
            block = regs(values, latest.address, latest.length)
            if block is None:
                missing(i, "the last-result block", latest.address, latest.length)
                continue
            if latest.bits is not None:
                src = latest.bits
                name = _TABLE[src.function]
                bits = regs(values, src.address, src.count, name)
                if bits is None:
                    missing(i, "the verdict bits", src.address, src.count, name)
                    continue
                block = [*block, sum(1 << k for k, b in enumerate(bits) if b)]
            if not any(block[:latest.length]):
                out.append(Entry(0, f"snapshot {i}", None, "the block is all zeros: no record "
                                 "yet (never written)"))
                continue
            cycle = _cycle(block, latest)
            add(i, f"block cycle {cycle}", decoder.decode_result(block, cycle, ctx,
                                                                 received_at),
                ring.fields, block)
            continue
        counter_regs = regs(values, ring.counter_address, ring.counter_registers)
        if counter_regs is None:
            missing(i, "the result counter", ring.counter_address, ring.counter_registers)
            continue
        try:
            counter = decoder.decode_counter(counter_regs)
        except DecodeError as exc:
            out.append(Entry(0, f"snapshot {i}", None, f"result counter: {exc}"))
            continue
        out.append(Entry(0, f"snapshot {i}", None, f"result counter {counter}"))
        mod = 1 << (16 * ring.counter_registers)
        for back in range(ring.depth):
            cycle = (counter - back) % mod
            address = ring.slot_address(cycle)
            slot = regs(values, address, ring.length)
            if slot is None:
                missing(i, f"slot of cycle {cycle}", address, ring.length)
                continue
            if not any(slot):
                continue  # never written: first contact skips it too
            item = decoder.decode_result(slot, cycle, ctx, received_at)
            if getattr(item, "reason", "").startswith("torn block") and back > 0:
                continue  # an older cycle's slot, overwritten or not yet reached
            add(i, f"slot cycle {cycle}", item, ring.fields, slot)
    return out


def _cycle(block: list[int], latest: Any) -> int:
    from gateway.profiles.registers import decode_registers

    at, width = latest.cycle_at, latest.cycle_registers
    value = decode_registers(block[at:at + width], latest.cycle_type,
                             word_order=latest.word_order, byte_order=latest.byte_order)
    assert isinstance(value, int)
    return value
