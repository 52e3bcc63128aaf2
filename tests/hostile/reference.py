"""Seeded generators of good and bad station input, with an independent reference decode.

Good register blocks are encoded with pymodbus's own ``convert_to_registers`` from values we
choose, and decoded back for the reference with pymodbus's ``convert_from_registers`` (not the
profile code under test); units go through pint. Only the register *layout* (offset, type,
word order, scale, unit, codes) is read from the profile: that is data, the thing the profile
declares, while the arithmetic under test is the profile code's. Good lines are written from
chosen values in the wire formats of sim/README.md, so the chosen values are the reference.
"""

from __future__ import annotations

import functools
import math
import random
import string
from collections.abc import Iterator
from dataclasses import dataclass
from datetime import UTC, datetime, timedelta
from typing import Any
from zoneinfo import ZoneInfo

import pint
from pymodbus.client import ModbusTcpClient

_U: Any = pint.UnitRegistry()
_DT = ModbusTcpClient.DATATYPE
_TYPES = {"uint16": _DT.UINT16, "int16": _DT.INT16, "uint32": _DT.UINT32, "int32": _DT.INT32,
          "float32": _DT.FLOAT32}  # fmt: skip
_CANON = {"pressure": "Pa", "time": "s", "temperature": "degC"}
# sccm at 0 °C and 101.325 kPa (README): a throughput Q (pressure × volume / time) divided by the
# standard pressure is a standard volume flow; pint does the unit arithmetic.
_P_STD = 101.325 * _U.kPa


@functools.cache
def _factor(unit: str, kind: str) -> float:
    if kind == "leak":
        if unit.lower() in ("sccm", "cm3/min", "ml/min"):
            return 1.0
        q = 1.0 * _U(unit.replace("*", " * ").replace("l", "L") if unit != "Pa*m3/s" else
                     "Pa * m ** 3 / s")
        return float((q / _P_STD).to("cm ** 3 / min").magnitude)
    return float((1.0 * _U(unit)).to(_CANON[kind]).magnitude)


def to_canonical(value: float, unit: str, kind: str) -> float:
    """Reference unit conversion with pint (independent of gateway.units)."""
    if kind == "temperature":
        if unit in ("C", "degC", "°C"):
            return value
        return float(_U.Quantity(value, unit).to("degC").magnitude)
    return value * _factor(unit, kind)


# -- Modbus -------------------------------------------------------------------------------------
def _encode(value: Any, type_: str, width: int, word_order: Any, byte_order: str) -> list[int]:
    if type_.startswith("string"):
        data = str(value).encode("ascii")[: 2 * width].ljust(2 * width, b"\0")
        if byte_order == "little":
            data = b"".join(data[i + 1 : i + 2] + data[i : i + 1] for i in range(0, len(data), 2))
        return [int.from_bytes(data[i : i + 2], "big") for i in range(0, len(data), 2)]
    regs = ModbusTcpClient.convert_to_registers(value, _TYPES[type_], word_order=word_order)
    return list(regs)


def ref_decode(regs: list[int], type_: str, word_order: Any, byte_order: str) -> Any:
    """One field's value by pymodbus (one value per call: see LIBRARIES.md on word order)."""
    if type_.startswith("string"):
        data = b"".join(r.to_bytes(2, "big") for r in regs)
        if byte_order == "little":
            data = b"".join(data[i + 1 : i + 2] + data[i : i + 1] for i in range(0, len(data), 2))
        return data.rstrip(b"\0").decode("ascii")
    return ModbusTcpClient.convert_from_registers(regs, _TYPES[type_], word_order=word_order)


@dataclass
class Block:
    regs: list[int]
    cycle: int
    good: bool
    why: str = ""
    values: dict[str, Any] | None = None


_RANGES = {  # plausible station values in the field's own (raw, unscaled-by-us) canonical kind
    "test_pressure_pa": (1.0e5, 6.0e5), "pressure_loss_pa": (0.0, 400.0),
    "leak_rate_sccm": (-0.8, 9.0), "reject_limit_sccm": (0.5, 5.0),
    "lower_limit_sccm": (-3.0, -0.5), "fill_s": (0.5, 20.0), "stabilise_s": (0.5, 30.0),
    "test_s": (0.5, 30.0), "temperature_c": (5.0, 45.0), "master_loss_pa": (1.0, 50.0),
    "standard_loss_pa": (120.0, 400.0), "standard_sccm": (0.5, 5.0),
    "standard_ref_pressure_pa": (1.0e5, 6.0e5),
}  # fmt: skip


def _raw_for(field: Any, canonical_value: float) -> float | int:
    """The register value that decodes to ``canonical_value`` (unit, then scale)."""
    kind = field.kind
    value = canonical_value
    if field.unit and kind in ("pressure", "leak", "time", "temperature"):
        value = canonical_value / to_canonical(1.0, field.unit, kind) if kind != "temperature" \
            else canonical_value
    value = (value - field.offset) / field.scale
    reg = field.register
    if reg.type in ("float32",):
        return float(value)
    lo, hi = {"uint16": (0, 65535), "int16": (-32768, 32767), "uint32": (0, 2**32 - 1),
              "int32": (-(2**31) + 1, 2**31 - 1)}[reg.type]  # fmt: skip
    return max(lo, min(hi, round(value)))


def good_block(spec: Any, block: Any, cycle: int, rng: random.Random, ctx: Any) -> list[int]:
    regs = [0] * block.length
    guard = _encode(cycle, block.counter_type, block.counter_registers, block.word_order,
                    block.byte_order)  # fmt: skip
    for at in (block.head_guard, block.tail_guard):
        regs[at : at + len(guard)] = guard
    for f in block.fields:
        reg = f.register
        if f.kind == "timestamp":
            value: Any = int(datetime(2026, 1, 1, tzinfo=UTC).timestamp())
            value += rng.randrange(3 * 10**7)
        elif f.kind == "program":
            value = rng.choice(sorted(ctx.programs))
        elif f.kind in ("verdict", "bool"):
            value = int(rng.choice(sorted(f.codes, key=str)), 0)
        elif f.kind == "text":
            width = 2 * reg.width
            value = "".join(rng.choice(string.ascii_uppercase + string.digits + "-")
                            for _ in range(rng.randint(1, width)))
        elif f.kind == "int":
            value = rng.randrange(0, 60000)
        else:
            lo, hi = _RANGES.get(f.canonical, (0.0, 100.0))
            value = _raw_for(f, rng.uniform(lo, hi))
        regs[reg.at : reg.at + reg.width] = _encode(value, reg.type, reg.width, reg.word_order,
                                                    reg.byte_order)  # fmt: skip
    return regs


def reference_values(block: Any, regs: list[int], ctx: Any) -> dict[str, Any]:
    """Canonical field values of a good block, decoded with pymodbus + pint."""
    out: dict[str, Any] = {}
    for f in block.fields:
        reg = f.register
        raw = ref_decode(regs[reg.at : reg.at + reg.width], reg.type, reg.word_order,
                         reg.byte_order)  # fmt: skip
        if f.kind == "timestamp":
            out[f.canonical] = datetime.fromtimestamp(raw, UTC)
        elif f.kind == "program":
            out[f.canonical] = ctx.programs.get(raw, str(raw))
        elif f.kind in ("verdict", "bool"):
            codes = {int(k, 0) if isinstance(k, str) else k: v for k, v in f.codes.items()}
            value = codes[raw]
            out[f.canonical] = getattr(value, "value", value)
        elif f.kind == "text":
            out[f.canonical] = raw or None
        elif f.kind == "int":
            out[f.canonical] = raw
        else:
            value = raw * f.scale + f.offset
            if f.unit:
                value = to_canonical(value, f.unit, f.kind)
            out[f.canonical] = value
    return out


def _mutations(spec: Any, block: Any, ctx: Any) -> list[str]:
    kinds = ["torn_head", "torn_tail", "short", "long"]
    for f in block.fields:
        if f.kind in ("verdict", "bool"):
            kinds.append(f"code:{f.canonical}")
        if f.register.type == "float32" and not (
            f.register.null is not None and isinstance(f.register.null, float)
        ):
            kinds.append(f"nan:{f.canonical}")
        if f.kind == "text":
            kinds.append(f"nonascii:{f.canonical}")
    return kinds


def blocks(spec: Any, block: Any, ctx: Any, n: int, seed: int, good_share: float,
           pool: int = 1000) -> Iterator[Block]:
    """``n`` blocks: good ones, and bad ones each with one mutation known to make it invalid.

    Good blocks come from a pool of ``pool`` encoded blocks (re-guarded with a fresh cycle
    number), so most of the time goes into the decoder under test, not into encoding.
    """
    rng = random.Random(seed)
    kinds = _mutations(spec, block, ctx)
    bases = [good_block(spec, block, 1, rng, ctx) for _ in range(pool)]
    width = block.counter_registers
    for _ in range(n):
        cycle = rng.randrange(1, 2**31)
        guard = _encode(cycle, block.counter_type, width, block.word_order, block.byte_order)
        regs = list(rng.choice(bases))
        for at in (block.head_guard, block.tail_guard):
            regs[at : at + width] = guard
        if rng.random() < good_share:
            yield Block(regs, cycle, True)
            continue
        kind = rng.choice(kinds)
        what, _, name = kind.partition(":")
        f = next((x for x in block.fields if x.canonical == name), None)
        if what == "torn_head":
            regs[block.head_guard] ^= 1 + rng.randrange(0xFFFE)
        elif what == "torn_tail":
            regs[block.tail_guard + width - 1] ^= 1 + rng.randrange(0xFFFE)
        elif what == "short":
            regs = regs[: rng.randrange(0, block.length)]
        elif what == "long":
            regs = regs + [rng.randrange(65536) for _ in range(rng.randint(1, 5))]
        elif what == "code" and f is not None:
            known = {int(k, 0) if isinstance(k, str) else int(k) for k in f.codes}
            bad = next(v for v in (rng.randrange(65536) for _ in range(100)) if v not in known)
            r = f.register
            regs[r.at : r.at + r.width] = _encode(bad, r.type, r.width, r.word_order, r.byte_order)
        elif what == "nan" and f is not None:
            r = f.register
            regs[r.at : r.at + r.width] = _encode(math.nan, "float32", 2, r.word_order, "big")
        elif what == "nonascii" and f is not None:
            r = f.register
            regs[r.at] = (0x80 | rng.randrange(0x7F)) << 8 | 0xC3
        yield Block(regs, cycle, False, kind)


# -- serial lines -----------------------------------------------------------------------------
@dataclass
class Line:
    text: str
    good: bool
    values: dict[str, Any]
    why: str = ""


_T0 = datetime(2026, 1, 1, 0, 0, 0)
_DELIM_CODES = {"ACC": "pass", "REJ": "reject", "GRS": "gross", "ABT": "aborted"}


def _delim_good(rng: random.Random, cycle: int) -> tuple[str, dict[str, Any]]:
    ended = _T0 + timedelta(seconds=rng.randrange(3 * 10**7))
    verdict = rng.choice(["ACC", "REJ", "GRS", "ABT"])
    p = round(rng.uniform(100, 600), 2)
    loss = round(rng.uniform(0, 400), 1)
    leak = round(rng.uniform(-0.9, 9.0), 3)
    lim = round(rng.uniform(0.5, 5.0), 3)
    lower = rng.choice([None, round(rng.uniform(-3, -0.5), 3)])
    fill, stab, test = (round(rng.uniform(0.5, 30), 1) for _ in range(3))
    temp = rng.choice([None, round(rng.uniform(5, 45), 2)])
    part = rng.choice([None, f"HX210-{rng.randrange(10**6):06d}"])
    text = (f"R;{cycle};{ended:%Y-%m-%d %H:%M:%S};HX-210;{part or ''};{verdict};{p:.2f};{loss:.1f};"
            f"{leak:.3f};{lim:.3f};{'' if lower is None else f'{lower:.3f}'};{fill:.1f};"
            f"{stab:.1f};{test:.1f};{'' if temp is None else f'{temp:.2f}'}")
    values = {"cycle": cycle, "local_ended": ended, "program": "HX-210", "part_id": part,
              "verdict": _DELIM_CODES[verdict],
              "test_pressure_pa": to_canonical(p, "kPa", "pressure"), "pressure_loss_pa": loss,
              "leak_rate_sccm": leak, "reject_limit_sccm": lim, "lower_limit_sccm": lower,
              "fill_s": fill, "stabilise_s": stab, "test_s": test, "temperature_c": temp}
    return text, values  # fmt: skip


_BAD_DELIM = ["verdict", "date", "number", "fields", "control", "long", "cycle", "empty_required"]


def delim_lines(n: int, seed: int, good_share: float = 0.4) -> Iterator[Line]:
    rng = random.Random(seed)
    for i in range(n):
        text, values = _delim_good(rng, i + 1)
        if rng.random() < good_share:
            yield Line(text, True, values)
            continue
        parts = text.split(";")
        why = rng.choice(_BAD_DELIM)
        if why == "verdict":
            parts[5] = rng.choice(["OK", "acc", "XXX", "1", "PASS"])
        elif why == "date":
            parts[2] = rng.choice(["2026-13-01 00:00:00", "2026-02-30 10:00:00", "yesterday",
                                   "2026-01-01 25:00:00", "2026-01-01T10:00:00Z"])
        elif why == "number":
            parts[rng.choice([6, 7, 8, 9, 11, 12, 13])] = rng.choice(
                ["1.2.3", "abc", "--1", "1,5", "0x10", "1e", "∞"])
        elif why == "fields":
            parts = parts[: rng.randrange(1, 14)] if rng.random() < 0.5 else [*parts, "x"]
        elif why == "control":
            pos = rng.randrange(1, len(text))
            text = text[:pos] + chr(rng.choice([0, 1, 7, 8, 11, 12, 27, 127])) + text[pos:]
            yield Line(text, False, {}, why)
            continue
        elif why == "long":
            yield Line(text + ";" + "9" * 600, False, {}, why)
            continue
        elif why == "cycle":
            parts[1] = rng.choice(["-5", "1.5", "x", "0x1F"])
        elif why == "empty_required":
            parts[rng.choice([1, 2, 3, 5, 6, 8, 9])] = ""
        yield Line(";".join(parts), False, {}, why)


def noise(n: int, seed: int) -> Iterator[str]:
    """Line noise: random printable and non-printable characters, never a valid record tag."""
    rng = random.Random(seed)
    alphabet = string.printable + "\x00\x01\x7f\xff\u00e9"
    for _ in range(n):
        text = "".join(rng.choice(alphabet) for _ in range(rng.randint(0, 120)))
        yield "#" + text  # '#' is no record's discriminator in any built-in profile


_PRINT_CODES = {"pass": "P", "reject": "F", "gross": "G", "aborted": "A"}
_KV_CODES = {"pass": "GOOD", "reject": "LEAK", "gross": "GROSS", "aborted": "STOP"}


def print_lines(n: int, seed: int, good_share: float = 0.4) -> Iterator[Line]:
    """lf-print fixed-width rows (layout: gateway/profiles/builtin/lf-print.toml)."""
    rng = random.Random(seed)
    for i in range(n):
        _, v = _delim_good(rng, i % 9_999_999 + 1)
        v = {**v, "lower_limit_sccm": None, "temperature_c": None}
        part = v["part_id"] or ""
        text = (f"R {v['cycle']:07d} {v['local_ended']:%d.%m.%y %H:%M:%S} {'HX-210':<8} "
                f"{part:<14} {_PRINT_CODES[v['verdict']]} {v['test_pressure_pa'] / 1000:7.2f} "
                f"{v['pressure_loss_pa']:6.1f} {v['leak_rate_sccm']:6.3f} "
                f"{v['reject_limit_sccm']:6.3f} {v['fill_s']:4.1f} {v['stabilise_s']:4.1f} "
                f"{v['test_s']:4.1f}")
        if rng.random() < good_share:
            yield Line(text, True, v)
            continue
        why = rng.choice(["verdict", "date", "number", "short", "control", "long"])
        if why == "verdict":
            text = text[:52] + rng.choice("XYZ?9") + text[53:]
        elif why == "date":
            text = text[:10] + rng.choice(["32.12.26 07:15:09", "02.13.26 07:15:09",
                                           "02.12.26 24:15:09", "xx.12.26 07:15:09"]) + text[27:]
        elif why == "number":
            at = rng.choice([54, 62, 69, 76])
            text = text[:at] + rng.choice(["  abc ", " 1.2.3", "  --1 ", " 1,50 "]) + text[at + 6:]
        elif why == "short":
            text = text[: rng.randrange(1, 52)]
        elif why == "control":
            pos = rng.randrange(1, len(text))
            text = text[:pos] + chr(rng.choice([0, 7, 27, 127])) + text[pos:]
        elif why == "long":
            text = text + " " * 150
        yield Line(text, False, {}, why)


def kv_answers(
    n: int, seed: int, good_share: float = 0.4
) -> Iterator[tuple[list[str], bool, dict[str, Any], str]]:
    """lf-kv answers to ?LAST (sim/README.md): lines without terminators, END excluded."""
    rng = random.Random(seed)
    for i in range(n):
        _, v = _delim_good(rng, i + 1)
        pu = rng.choice(["kPa", "psi", "bar", "mbar"])
        p_unit = v["test_pressure_pa"] / to_canonical(1.0, pu, "pressure")
        loss_unit = v["pressure_loss_pa"] / to_canonical(1.0, pu, "pressure")
        ended = v["local_ended"]
        lines = [
            "TYPE=RES", f"CYC={v['cycle']}", f"TS={ended:%Y-%m-%dT%H:%M:%SZ}", "PRG=MV-44",
            f"SN={v['part_id'] or ''}", f"VRD={_KV_CODES[v['verdict']]}", f"PU={pu}", "LU=sccm",
            f"P={p_unit:.3f}", f"DP={loss_unit:.5f}", f"LR={v['leak_rate_sccm']:.3f}",
            f"LIM={v['reject_limit_sccm']:.3f}",
            f"LLIM={'' if v['lower_limit_sccm'] is None else format(v['lower_limit_sccm'], '.3f')}",
            f"TF={v['fill_s']:.1f}", f"TST={v['stabilise_s']:.1f}", f"TT={v['test_s']:.1f}",
            f"TMP={'' if v['temperature_c'] is None else format(v['temperature_c'], '.1f')}",
        ]  # fmt: skip
        ref = {**v, "program": "MV-44",
               "test_pressure_pa": round(p_unit, 3) * to_canonical(1.0, pu, "pressure"),
               "pressure_loss_pa": round(loss_unit, 5) * to_canonical(1.0, pu, "pressure"),
               "temperature_c": None if v["temperature_c"] is None
               else round(v["temperature_c"], 1)}
        if rng.random() < good_share:
            yield lines, True, ref, ""
            continue
        why = rng.choice(["drop", "verdict", "unit", "number", "ts", "control", "type"])
        if why == "drop":
            del lines[rng.choice([1, 2, 5, 8, 10, 11])]
        elif why == "verdict":
            lines[5] = "VRD=" + rng.choice(["OK", "good", "FAIL", ""])
        elif why == "unit":
            lines[6] = "PU=" + rng.choice(["furlong", "kpa2", "", "Pa/s"])
        elif why == "number":
            at = rng.choice([8, 9, 10, 11, 13])
            lines[at] = lines[at].split("=")[0] + "=" + rng.choice(["abc", "1.2.3", "--3", "1e"])
        elif why == "ts":
            lines[2] = "TS=" + rng.choice(
                ["2026-13-01T00:00:00Z", "yesterday", "2026-02-30T01:00:00Z"])
        elif why == "control":
            at = rng.randrange(len(lines))
            lines[at] = lines[at] + chr(rng.choice([0, 7, 27, 127]))
        elif why == "type":
            lines[0] = "TYPE=" + rng.choice(["XYZ", "", "res"])
        yield lines, False, {}, why


_SEMI_CODES = {"pass": "OK", "reject": "NOK", "gross": "GROSS", "aborted": "ABORT"}


def _comma(value: float, digits: int, thousands: bool = False) -> str:
    """A number the way lf-semi writes it: decimal comma, optional thousands points."""
    text = f"{value:,.{digits}f}" if thousands else f"{value:.{digits}f}"
    return text.replace(",", "\x00").replace(".", ",").replace("\x00", ".")


def semi_lines(n: int, seed: int, good_share: float = 0.4) -> Iterator[Line]:
    """lf-semi lines (gateway/profiles/builtin/lf-semi.toml): decimal comma, thousands points,
    date and time columns; gross and aborted tests with empty readings."""
    rng = random.Random(seed)
    for i in range(n):
        ended = _T0 + timedelta(seconds=rng.randrange(3 * 10**7))
        verdict = rng.choice(list(_SEMI_CODES))
        p_mbar = round(rng.uniform(500, 6000), 1)
        loss = round(rng.uniform(-2, 400), 2)
        leak = round(rng.uniform(-0.9, 9.0), 3)
        reading = verdict in ("pass", "reject")
        text = (f"{ended:%d.%m.%y};{ended:%H:%M:%S};{i + 1:06d};P{i};1;"
                f"{_comma(p_mbar, 1, thousands=True)};"
                f"{_comma(loss, 2) if reading else ''};{_comma(leak, 3) if reading else ''};"
                f"{_SEMI_CODES[verdict]}")
        values = {"cycle": i + 1, "local_ended": ended, "program": "HX-210", "part_id": f"P{i}",
                  "verdict": verdict, "test_pressure_pa": p_mbar * 100.0,
                  "pressure_loss_pa": loss if reading else None,
                  "leak_rate_sccm": leak if reading else None}
        if rng.random() < good_share:
            yield Line(text, True, values)
            continue
        parts = text.split(";")
        why = rng.choice(["verdict", "date", "number", "fields", "control"])
        if why == "verdict":
            parts[8] = rng.choice(["ok", "PASS", "X", "1"])
        elif why == "date":
            parts[0] = rng.choice(["31.02.26", "2026-01-01", "1.1", "32.01.26"])
        elif why == "number":
            parts[5] = rng.choice(["1,2,3", "abc", "--1", "0x10", "1e", "∞", "1.2.3,4,5"])
        elif why == "fields":
            parts = parts[:rng.randrange(1, 8)] if rng.random() < 0.5 else [*parts, "x"]
        else:
            pos = rng.randrange(1, len(text))
            text = text[:pos] + chr(rng.choice([0, 1, 7, 27, 127])) + text[pos:]
            yield Line(text, False, {}, why)
            continue
        yield Line(";".join(parts), False, {}, why)


_NOCLOCK_CODES = {"pass": "PASS", "reject": "FAIL", "gross": "GROSS", "aborted": "ABORT"}


def _crc_line(payload: str) -> str:
    import binascii

    return f"{payload} *{binascii.crc_hqx(payload.encode(), 0xFFFF):04X}"


def noclock_lines(n: int, seed: int, good_share: float = 0.4) -> Iterator[Line]:
    """lf-noclock lines: untagged, trailing minus, "---" placeholders, CRC-16 per line."""
    rng = random.Random(seed)
    for i in range(n):
        verdict = rng.choice(list(_NOCLOCK_CODES))
        leak = round(rng.uniform(-0.9, 9.0), 2)
        loss = round(rng.uniform(-2, 400), 1)
        reading = verdict in ("pass", "reject")

        def signed(v: float) -> str:
            return f"{abs(v):.2f}-" if v < 0 else f"{v:.2f}"

        payload = (f"{i + 1} P{i % 100:02d} {signed(leak) if reading else '---'} "
                   f"{signed(loss) if reading else '---'} {_NOCLOCK_CODES[verdict]}")
        values = {"cycle": i + 1, "program": f"P{i % 100:02d}", "verdict": verdict,
                  "leak_rate_sccm": leak if reading else None,
                  "pressure_loss_pa": round(loss, 2) if reading else None,
                  "time_source": "gateway"}
        if rng.random() < good_share:
            yield Line(_crc_line(payload), True, values)
            continue
        why = rng.choice(["crc", "number", "fields", "verdict", "control"])
        if why == "crc":
            line = _crc_line(payload)
            line = line[:-1] + ("0" if line[-1] != "0" else "1")
        elif why == "number":
            parts = payload.split(" ")
            parts[2] = rng.choice(["1..2", "abc", "-", "1e", "--1"])
            line = _crc_line(" ".join(parts))
        elif why == "fields":
            line = _crc_line(payload + " X") if rng.random() < 0.5 else _crc_line("1 P01")
        elif why == "verdict":
            line = _crc_line(payload.rsplit(" ", 1)[0] + " OK")
        else:
            pos = rng.randrange(1, len(payload))
            line = _crc_line(payload[:pos] + chr(rng.choice([0, 1, 7, 27, 127])) + payload[pos:])
        yield Line(line, False, {}, why)


_MBINPUT_BITS = {"pass": 1, "reject": 2, "gross": 3, "aborted": 4}


def mbinput_blocks(n: int, seed: int, good_share: float = 0.4) -> Iterator[Block]:
    """lf-mbinput ring slots (gateway/profiles/builtin/lf-mbinput.toml): values chosen and
    encoded with pymodbus; bad ones with an impossible clock, no verdict bit, a torn guard,
    a NaN leak without "null", or the wrong length."""
    rng = random.Random(seed)
    dt = ModbusTcpClient.DATATYPE
    for _ in range(n):
        cycle = rng.randrange(65536)
        when = _T0 + timedelta(seconds=rng.randrange(3 * 10**7))
        verdict = rng.choice(list(_MBINPUT_BITS))
        status = 1 << _MBINPUT_BITS[verdict] | rng.choice([0, 0x1000, 0x2000, 0x3001])
        p = round(rng.uniform(500, 6000), 1)
        loss = rng.randrange(-200, 40000)
        leak = round(rng.uniform(-0.9, 9.0), 3)
        regs = [cycle, when.year, when.month, when.day, when.hour, when.minute, when.second,
                *_encode("P1234567", "string(4)", 4, "big", "big"), 2,
                *ModbusTcpClient.convert_to_registers(p, dt.FLOAT32, word_order="little"),
                *ModbusTcpClient.convert_to_registers(loss, dt.INT32, word_order="big"),
                *ModbusTcpClient.convert_to_registers(leak, dt.FLOAT32, word_order="big"),
                status, 0, 0, 0, 0, cycle]
        values = {"cycle": cycle, "verdict": verdict,
                  # a local time in the autumn's repeated hour is taken as its first occurrence
                  # (fold 0, PEP 495); compared in UTC, since Python never calls an ambiguous
                  # time equal to a time in another zone
                  "ended_at": when.replace(tzinfo=ZoneInfo("Europe/Berlin")).astimezone(UTC),
                  "pressure_loss_pa": loss / 100.0,
                  "leak_rate_sccm": float(ModbusTcpClient.convert_from_registers(
                      ModbusTcpClient.convert_to_registers(leak, dt.FLOAT32), dt.FLOAT32))}
        if rng.random() < good_share:
            yield Block(regs, cycle, True, "", values)
            continue
        why = rng.choice(["clock", "bits", "torn", "nan", "short"])
        if why == "clock":
            regs[2] = rng.choice([0, 13, 99, 65535])
        elif why == "bits":
            regs[18] = rng.choice([0, 1, 0x1000, 0x3001, 0x8001])
        elif why == "torn":
            regs[23] = (cycle + 1 + rng.randrange(65534)) % 65536
        elif why == "nan":
            regs[16:18] = ModbusTcpClient.convert_to_registers(math.inf, dt.FLOAT32)
        else:
            regs = regs[: rng.randrange(0, 23)]
        yield Block(regs, cycle, False, why)


_TICKET_CODES = {"pass": "PASS", "reject": "FAIL", "gross": "GROSS", "aborted": "ABORT"}


@dataclass(frozen=True)
class Answer:
    lines: list[str]
    good: bool
    values: dict[str, Any]
    why: str = ""


def _ticket(body_lines: list[str], check: str | None = None) -> list[str]:
    """STX, the lines, ETX and the XOR of the bytes after STX up to ETX (the usual BCC,
    common practice), as the lines a reader gets (terminators removed)."""
    body = "\r\n".join(body_lines) + "\r\n\x03"
    bcc = 0
    for ch in body.encode("latin-1"):
        bcc ^= ch
    text = "\x02" + body + (check if check is not None else f"{bcc:02X}")
    return text.split("\r\n")


def ticket_answers(n: int, seed: int, address: int = 1,
                   good_share: float = 0.4) -> Iterator[Answer]:
    """lf-ticket answers (gateway/profiles/builtin/lf-ticket.toml): framed KEY value tickets
    from chosen values; bad ones with one mutation each (wrong check, no STX, no ETX, another
    station's address, unknown key, key twice, junk number, impossible date, control
    character, unknown result code)."""
    rng = random.Random(seed)
    for i in range(n):
        verdict = rng.choice(list(_TICKET_CODES))
        reading = verdict in ("pass", "reject")
        when = _T0 + timedelta(seconds=rng.randrange(3 * 10**7))
        leak = round(rng.uniform(-0.9, 9.0), 3)
        loss = round(rng.uniform(-2, 400), 1)
        bar = round(rng.uniform(0.5, 8.0), 3)
        body = [f"ADR {address:02d}", "KIND TEST", f"NO {i + 1:06d}",
                f"DATE {when:%d/%m/%y}", f"TIME {when:%H:%M:%S}", "PROG HX-210",
                f"PART P{i:07d}", f"PRESS {bar:.3f}",
                f"LOSS {loss:.1f}" if reading else "LOSS ----",
                f"LEAK {leak:.3f}" if reading else "LEAK ----",
                "LIMIT 2.000", f"RESULT {_TICKET_CODES[verdict]}"]
        values = {"cycle": i + 1, "verdict": verdict, "program": "HX-210",
                  "local_ended": when, "part_id": f"P{i:07d}",
                  "test_pressure_pa": bar * 1e5,  # 1 bar = 100 000 Pa (SI brochure, 9th ed.)
                  "pressure_loss_pa": loss if reading else None,
                  "leak_rate_sccm": leak if reading else None, "reject_limit_sccm": 2.0}
        if rng.random() < good_share:
            yield Answer(_ticket(body), True, values)
            continue
        why = rng.choice(["check", "stx", "etx", "address", "key", "twice", "number", "date",
                          "control", "code"])
        lines = _ticket(body)
        if why == "check":
            good = lines[-1][-2:]
            lines = _ticket(body, "00" if good != "00" else "01")
        elif why == "stx":
            lines[0] = lines[0][1:]
        elif why == "etx":
            lines = lines[:-1]
        elif why == "address":
            lines = _ticket([f"ADR {address + 1:02d}", *body[1:]])
        elif why == "key":
            lines = _ticket([*body, "COLOUR red"])
        elif why == "twice":
            lines = _ticket([*body, "NO 000001"])
        elif why == "number":
            lines = _ticket([*body[:7], f"PRESS {rng.choice(['1..2', 'abc', '-', '1e'])}",
                             *body[8:]])
        elif why == "date":
            lines = _ticket([*body[:3], f"DATE {rng.choice(['31/02/26', '00/01/26', 'x'])}",
                             *body[4:]])
        elif why == "control":
            at = rng.randrange(1, len(body))
            lines = _ticket([*body[:at], body[at] + chr(rng.choice([0, 1, 7, 27, 127])),
                             *body[at + 1:]])
        else:
            lines = _ticket([*body[:-1], "RESULT MAYBE"])
        yield Answer(lines, False, {}, why)
