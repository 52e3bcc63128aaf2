"""Reading a Modbus profile: ``[modbus]``, the result ring or last-result block, the
calibration block, the state register and the acknowledge.
"""

from __future__ import annotations

import codecs
import itertools
from collections.abc import Sequence
from typing import Any

from gateway.profiles.load_fields import _fields, _Reader
from gateway.profiles.load_trace import load_trace_block
from gateway.profiles.modbus_schema import apply_latest
from gateway.profiles.model import (
    AckSpec,
    BlockSpec,
    FieldSpec,
    ModbusSpec,
    RegisterField,
    RingSpec,
)
from gateway.profiles.registers import parse_type
from gateway.records import StationState

__all__ = ["MAX_READ"]


MAX_READ = 125  # Modbus spec: at most 125 registers per read


def _check_layout(r: _Reader, path: str, length: int, guards: Sequence[tuple[str, int, int]],
                  fields: Sequence[FieldSpec]) -> None:
    spans = [(name, at, width) for name, at, width in guards]
    for f in fields:
        assert f.register is not None
        spans.append((f.canonical, f.register.at, f.register.width))
    for name, at, width in spans:
        if at + width > length:
            r.fail(f"{path}.fields.{name}" if not name.endswith("_guard") else f"{path}.{name}",
                   f"registers inside the block of length {length} (at {at} + {width} "
                   f"registers ends at {at + width})")
    spans.sort(key=lambda s: s[1])
    for a, b in itertools.pairwise(spans):
        if b[1] < a[1] + a[2]:
            r.fail(f"{path}.fields.{b[0]}" if not b[0].endswith("_guard") else f"{path}.{b[0]}",
                   f"registers that do not overlap: {a[0]} uses +{a[1]}..+{a[1] + a[2] - 1}, "
                   f"{b[0]} starts at +{b[1]}")


def _modbus(r: _Reader, doc: dict[str, Any], label: str, ref_c: float) -> ModbusSpec:
    m = r.sub(doc, "modbus", "")
    latest = apply_latest(m, r.fail)  # a last-result block: [modbus.result] gets a 1-slot ring
    r.table(m, "modbus", ("framer", "device_id", "function", "poll_interval_s", "timeout_s",
                          "word_order", "byte_order", "baudrate", "bytesize", "parity",
                          "stopbits", "string_encoding", "state", "result", "calibration",
                          "acknowledge", "trace"))
    framer = r.string(m, "framer", "modbus", choices=("tcp", "rtu"))
    device_id = r.integer(m, "device_id", "modbus", lo=0, hi=247 if framer == "rtu" else 255)
    function = r.integer(m, "function", "modbus")
    if function not in (3, 4):
        r.fail("modbus.function", "3 (holding registers) or 4 (input registers)", function)
    wo = r.string(m, "word_order", "modbus", "big", ("big", "little"))
    bo = r.string(m, "byte_order", "modbus", "big", ("big", "little"))
    encoding = r.string(m, "string_encoding", "modbus", "ascii")
    try:
        codecs.lookup(encoding)
    except LookupError:
        r.fail("modbus.string_encoding", "a Python codec name such as \"ascii\"", encoding)
    serial_keys = ("baudrate", "bytesize", "parity", "stopbits")
    if framer == "tcp":
        for key in serial_keys:
            if key in m:
                r.fail(f"modbus.{key}", "no serial settings with framer = \"tcp\"", m[key])
    stopbits = r.number(m, "stopbits", "modbus", 1.0)
    if stopbits not in (1.0, 1.5, 2.0):
        r.fail("modbus.stopbits", "1, 1.5 or 2", m["stopbits"])
    regions: list[tuple[str, int, int]] = []

    state = None
    state_map: dict[int, StationState] = {}
    if "state" in m:
        st = r.sub(m, "state", "modbus")
        r.table(st, "modbus.state", ("address", "type", "codes", "word_order", "byte_order"))
        address = r.integer(st, "address", "modbus.state", lo=0, hi=65535)
        type_name = r.string(st, "type", "modbus.state", "uint16", ("uint16", "int16", "uint32"))
        # a standalone register: ``at`` is its absolute address
        state = RegisterField(address, type_name, parse_type(type_name)[1],
                              r.string(st, "word_order", "modbus.state", wo, ("big", "little")),
                              r.string(st, "byte_order", "modbus.state", bo, ("big", "little")))
        codes = r.get(st, "codes", "modbus.state", (dict,), "a table of register value = state")
        states = [s.value for s in StationState]
        for code, target in codes.items():
            where = f"modbus.state.codes.{code}"
            try:
                number = int(code, 0)
            except ValueError:
                r.fail(where, "an integer register value as the key", code)
            if target not in states:
                r.fail(where, "one of " + ", ".join(states), target)
            state_map[number] = StationState(target)
        regions.append(("modbus.state", address, state.width))

    rs = r.sub(m, "result", "modbus")
    path = "modbus.result"
    r.table(rs, path, ("counter_address", "counter_type", "base", "stride", "depth", "length",
                       "head_guard", "tail_guard", "word_order", "byte_order", "fields"))
    counter_type = r.string(rs, "counter_type", path, "uint32", ("uint16", "uint32"))
    counter_address = r.integer(rs, "counter_address", path, lo=0, hi=65535)
    length = r.integer(rs, "length", path, lo=1)
    if length > MAX_READ:
        r.fail(f"{path}.length", f"at most {MAX_READ} registers (one Modbus read)", length)
    stride = r.integer(rs, "stride", path, length, lo=1)
    if stride < length:
        r.fail(f"{path}.stride", f"a stride >= length ({length}) so slots do not overlap", stride)
    depth = r.integer(rs, "depth", path, lo=1, hi=4096)
    base = r.integer(rs, "base", path, lo=0, hi=65535)
    if base + stride * (depth - 1) + length > 65536:
        r.fail(f"{path}.depth", "a ring that ends below address 65536", depth)
    width = parse_type(counter_type)[1]
    rwo = r.string(rs, "word_order", path, wo, ("big", "little"))
    rbo = r.string(rs, "byte_order", path, bo, ("big", "little"))
    head = r.integer(rs, "head_guard", path, lo=0)
    tail = r.integer(rs, "tail_guard", path, lo=0)
    fields = _fields(r, r.sub(rs, "fields", path), f"{path}.fields", "result", registers=True,
                     word_order=rwo, byte_order=rbo)
    guards = [("head_guard", head, width)]
    if latest is None:  # a last-result block has one cycle, standing for both guards
        guards.append(("tail_guard", tail, width))
    _check_layout(r, path, length, guards, fields)
    if latest is None:  # a last-result block's counter lies inside the block
        regions.append((f"{path}.counter_address", counter_address, width))
    regions.append((f"{path}.base", base, base + stride * (depth - 1) + length - base))
    result = RingSpec(counter_address, counter_type, base, stride, depth, length, head, tail,
                      fields, rwo, rbo)

    calibration = None
    if "calibration" in m:
        cs = r.sub(m, "calibration", "modbus")
        path = "modbus.calibration"
        r.table(cs, path, ("counter_address", "counter_type", "address", "length",
                           "head_guard", "tail_guard", "word_order", "byte_order", "fields"))
        ctype = r.string(cs, "counter_type", path, "uint32", ("uint16", "uint32"))
        caddr = r.integer(cs, "counter_address", path, lo=0, hi=65535)
        clen = r.integer(cs, "length", path, lo=1)
        if clen > MAX_READ:
            r.fail(f"{path}.length", f"at most {MAX_READ} registers (one Modbus read)", clen)
        address = r.integer(cs, "address", path, lo=0, hi=65536 - clen)
        cwidth = parse_type(ctype)[1]
        cwo = r.string(cs, "word_order", path, wo, ("big", "little"))
        cbo = r.string(cs, "byte_order", path, bo, ("big", "little"))
        chead = r.integer(cs, "head_guard", path, lo=0)
        ctail = r.integer(cs, "tail_guard", path, lo=0)
        cfields = _fields(r, r.sub(cs, "fields", path), f"{path}.fields", "calibration",
                          registers=True, word_order=cwo, byte_order=cbo)
        _check_layout(r, path, clen, [("head_guard", chead, cwidth),
                                      ("tail_guard", ctail, cwidth)], cfields)
        regions.append((f"{path}.counter_address", caddr, cwidth))
        regions.append((f"{path}.address", address, clen))
        calibration = BlockSpec(caddr, ctype, address, clen, chead, ctail, cfields, cwo, cbo)

    ordered = sorted(regions, key=lambda x: x[1])
    for a, b in itertools.pairwise(ordered):
        if b[1] < a[1] + a[2]:
            r.fail(b[0], f"an address range that does not overlap {a[0]} "
                   f"({a[1]}..{a[1] + a[2] - 1}); got {b[1]}..{b[1] + b[2] - 1}")

    acknowledge = None
    if "acknowledge" in m:
        ack = r.sub(m, "acknowledge", "modbus")
        r.table(ack, "modbus.acknowledge", ("enabled", "address", "type"))
        if r.boolean(ack, "enabled", "modbus.acknowledge", False):
            # always written to a holding register (function 6/16), also when the data are
            # input registers (function 4): stations keep their handshake where they can write
            acknowledge = AckSpec(
                r.integer(ack, "address", "modbus.acknowledge", lo=0, hi=65535),
                r.string(ack, "type", "modbus.acknowledge", "uint32", ("uint16", "uint32")),
            )

    return ModbusSpec(
        framer=framer, device_id=device_id, function=function,
        poll_interval_s=r.number(m, "poll_interval_s", "modbus", 1.0, positive=True),
        timeout_s=r.number(m, "timeout_s", "modbus", 1.0, positive=True),
        word_order=wo, byte_order=bo, state=state, state_map=state_map, result=result,
        calibration=calibration, acknowledge=acknowledge, profile_label=label,
        baudrate=r.integer(m, "baudrate", "modbus", 19200, lo=50, hi=4_000_000),
        bytesize=r.integer(m, "bytesize", "modbus", 8, lo=5, hi=8),
        parity=r.string(m, "parity", "modbus", "N", ("N", "E", "O", "M", "S")),
        stopbits=stopbits, string_encoding=encoding, leak_reference_c=ref_c, latest=latest,
        trace=load_trace_block(r, m),
    )
