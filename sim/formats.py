"""Wire formats of the four station types (the contract in sim/README.md). Pure functions.

Each encoder turns a station's record into what goes on the wire (a line, an answer, a register
block) and also returns what that wire text means in canonical fields and units after the
station's own rounding (``reported``), with the rounding step of each field (``resolution``,
0 = exact, e.g. float32 registers read back bit for bit). The truth log records both, so a test
can compare what a gateway decoded with what the station said, field by field.
"""

from __future__ import annotations

import math
import struct
from dataclasses import dataclass
from datetime import UTC, datetime
from typing import Any, Literal
from zoneinfo import ZoneInfo

from gateway.records import Verdict
from gateway.units import from_canonical, to_canonical
from sim.station import SimCalibration, SimResult

__all__ = [
    "MBRTU",
    "MBTCP",
    "Encoded",
    "RegisterMap",
    "decode_string",
    "delim_calibration",
    "delim_result",
    "encode_f32",
    "encode_i16",
    "encode_i32",
    "encode_string",
    "encode_u32",
    "kv_calibration",
    "kv_id",
    "kv_result",
    "modbus_calibration",
    "modbus_result",
    "modbus_state",
]

WordOrder = Literal["big", "little"]


@dataclass(frozen=True, slots=True)
class Encoded:
    """Wire payload plus its meaning in canonical fields and the rounding step of each."""

    payload: Any  # bytes (a line), list[str] (an answer), list[int] (registers)
    reported: dict[str, Any]
    resolution: dict[str, float]


def _iso(t: datetime) -> str:
    return t.astimezone(UTC).isoformat().replace("+00:00", "Z")


def _seconds(t: datetime) -> datetime:
    return t.replace(microsecond=0)


def _fixed(value: float, decimals: int) -> str:
    """Fixed decimals, and never "-0.000"."""
    text = f"{value:.{decimals}f}"
    return f"{0.0:.{decimals}f}" if float(text) == 0 else text


def _back(text: str, unit: str, kind: str) -> float:
    return to_canonical(float(text), unit, kind)  # type: ignore[arg-type]


# ---- lf-delim ---------------------------------------------------------------------------
DELIM_VERDICT = {
    Verdict.PASS: "ACC",
    Verdict.REJECT: "REJ",
    Verdict.GROSS: "GRS",
    Verdict.ABORTED: "ABT",
}
DELIM_RESOLUTION = {
    "ended_at": 1.0,
    "test_pressure_pa": 10.0,
    "pressure_loss_pa": 0.1,
    "leak_rate_sccm": 0.001,
    "reject_limit_sccm": 0.001,
    "lower_limit_sccm": 0.001,
    "fill_s": 0.1,
    "stabilise_s": 0.1,
    "test_s": 0.1,
    "temperature_c": 0.01,
}


def delim_result(r: SimResult, tz: ZoneInfo) -> Encoded:
    """``R;...`` line (without the line end); times in the station's local time."""
    local = _seconds(r.station_time).astimezone(tz)
    fields = [
        "R",
        str(r.cycle),
        local.strftime("%Y-%m-%d %H:%M:%S"),
        r.program,
        r.part_id or "",
        DELIM_VERDICT[r.verdict],
        _fixed(from_canonical(r.test_pressure_pa, "kPa", "pressure"), 2),
        _fixed(r.pressure_loss_pa, 1),
        _fixed(r.leak_rate_sccm, 3),
        _fixed(r.reject_limit_sccm, 3),
        "" if r.lower_limit_sccm is None else _fixed(r.lower_limit_sccm, 3),
        _fixed(r.fill_s, 1),
        _fixed(r.stabilise_s, 1),
        _fixed(r.test_s, 1),
        _fixed(r.temperature_c, 2),
    ]
    reported = {
        "cycle": r.cycle,
        "ended_at": _iso(local),
        "program": r.program,
        "part_id": r.part_id,
        "verdict": r.verdict.value,
        "test_pressure_pa": _back(fields[6], "kPa", "pressure"),
        "pressure_loss_pa": float(fields[7]),
        "leak_rate_sccm": float(fields[8]),
        "reject_limit_sccm": float(fields[9]),
        "lower_limit_sccm": None if not fields[10] else float(fields[10]),
        "fill_s": float(fields[11]),
        "stabilise_s": float(fields[12]),
        "test_s": float(fields[13]),
        "temperature_c": float(fields[14]),
    }
    return Encoded(";".join(fields).encode("ascii"), reported, dict(DELIM_RESOLUTION))


def delim_calibration(c: SimCalibration, tz: ZoneInfo) -> Encoded:
    """``C;...`` line (without the line end)."""
    local = _seconds(c.station_time).astimezone(tz)
    ratio = c.ratio
    fields = [
        "C",
        local.strftime("%Y-%m-%d %H:%M:%S"),
        c.program,
        _fixed(c.master_loss_pa, 1),
        _fixed(c.standard_loss_pa, 1),
        _fixed(c.standard_sccm, 3),
        _fixed(from_canonical(c.standard_ref_pressure_pa, "kPa", "pressure"), 1),
        "" if ratio is None else _fixed(ratio, 3),
        "OK" if c.passed else "NG",
    ]
    master, standard, flow = float(fields[3]), float(fields[4]), float(fields[5])
    reported = {
        "ended_at": _iso(local),
        "program": c.program,
        "master_loss_pa": master,
        "standard_loss_pa": standard,
        "standard_sccm": flow,
        "standard_ref_pressure_pa": _back(fields[6], "kPa", "pressure"),
        "ratio": float(fields[7]) if fields[7] else None,
        "sensitivity": _sensitivity(flow, master, standard),
        "passed": c.passed,
    }
    resolution = {
        "ended_at": 1.0,
        "master_loss_pa": 0.1,
        "standard_loss_pa": 0.1,
        "standard_sccm": 0.001,
        "standard_ref_pressure_pa": 100.0,
        "ratio": 0.001,
    }
    return Encoded(";".join(fields).encode("ascii"), reported, resolution)


def _sensitivity(flow: float, master: float, standard: float) -> float | None:
    span = standard - master
    return flow / span if span > 0 else None


# ---- lf-kv ------------------------------------------------------------------------------
KV_VERDICT = {
    Verdict.PASS: "GOOD",
    Verdict.REJECT: "LEAK",
    Verdict.GROSS: "GROSS",
    Verdict.ABORTED: "STOP",
}
_PSI_STEP = to_canonical(0.001, "psi", "pressure")
_PSI_FINE = to_canonical(0.00001, "psi", "pressure")


def kv_result(r: SimResult) -> Encoded:
    """Answer lines to ``?LAST`` (without line ends, ``END`` included)."""
    ts = _seconds(r.station_time)
    pairs = [
        ("TYPE", "RES"),
        ("CYC", str(r.cycle)),
        ("TS", _iso(ts)),
        ("PRG", r.program),
        ("SN", r.part_id or ""),
        ("VRD", KV_VERDICT[r.verdict]),
        ("PU", "psi"),
        ("LU", "sccm"),
        ("P", _fixed(from_canonical(r.test_pressure_pa, "psi", "pressure"), 3)),
        ("DP", _fixed(from_canonical(r.pressure_loss_pa, "psi", "pressure"), 5)),
        ("LR", _fixed(r.leak_rate_sccm, 3)),
        ("LIM", _fixed(r.reject_limit_sccm, 3)),
        ("LLIM", "" if r.lower_limit_sccm is None else _fixed(r.lower_limit_sccm, 3)),
        ("TF", _fixed(r.fill_s, 1)),
        ("TST", _fixed(r.stabilise_s, 1)),
        ("TT", _fixed(r.test_s, 1)),
        ("TMP", _fixed(r.temperature_c, 1)),
    ]
    v = dict(pairs)
    reported = {
        "cycle": r.cycle,
        "ended_at": _iso(ts),
        "program": r.program,
        "part_id": r.part_id,
        "verdict": r.verdict.value,
        "test_pressure_pa": _back(v["P"], "psi", "pressure"),
        "pressure_loss_pa": _back(v["DP"], "psi", "pressure"),
        "leak_rate_sccm": float(v["LR"]),
        "reject_limit_sccm": float(v["LIM"]),
        "lower_limit_sccm": float(v["LLIM"]) if v["LLIM"] else None,
        "fill_s": float(v["TF"]),
        "stabilise_s": float(v["TST"]),
        "test_s": float(v["TT"]),
        "temperature_c": float(v["TMP"]),
    }
    resolution = {
        "ended_at": 1.0,
        "test_pressure_pa": _PSI_STEP,
        "pressure_loss_pa": _PSI_FINE,
        "leak_rate_sccm": 0.001,
        "reject_limit_sccm": 0.001,
        "lower_limit_sccm": 0.001,
        "fill_s": 0.1,
        "stabilise_s": 0.1,
        "test_s": 0.1,
        "temperature_c": 0.1,
    }
    return Encoded([f"{k}={val}" for k, val in pairs] + ["END"], reported, resolution)


def kv_calibration(c: SimCalibration) -> Encoded:
    """Answer lines to ``?CAL``."""
    ts = _seconds(c.station_time)
    pairs = [
        ("TYPE", "CAL"),
        ("TS", _iso(ts)),
        ("PRG", c.program),
        ("PU", "psi"),
        ("LU", "sccm"),
        ("ML", _fixed(from_canonical(c.master_loss_pa, "psi", "pressure"), 5)),
        ("SL", _fixed(from_canonical(c.standard_loss_pa, "psi", "pressure"), 5)),
        ("STD", _fixed(c.standard_sccm, 3)),
        ("STDP", _fixed(from_canonical(c.standard_ref_pressure_pa, "psi", "pressure"), 3)),
        ("OK", "1" if c.passed else "0"),
    ]
    v = dict(pairs)
    master = _back(v["ML"], "psi", "pressure")
    standard = _back(v["SL"], "psi", "pressure")
    flow = float(v["STD"])
    reported = {
        "ended_at": _iso(ts),
        "program": c.program,
        "master_loss_pa": master,
        "standard_loss_pa": standard,
        "standard_sccm": flow,
        "standard_ref_pressure_pa": _back(v["STDP"], "psi", "pressure"),
        "ratio": standard / master if master > 0 else None,
        "sensitivity": _sensitivity(flow, master, standard),
        "passed": c.passed,
    }
    resolution = {
        "ended_at": 1.0,
        "master_loss_pa": _PSI_FINE,
        "standard_loss_pa": _PSI_FINE,
        "standard_sccm": 0.001,
        "standard_ref_pressure_pa": _PSI_STEP,
    }
    return Encoded([f"{k}={val}" for k, val in pairs] + ["END"], reported, resolution)


def kv_id(serial: str) -> list[str]:
    return ["MODEL=LF-KV", "FW=2.3", f"SER={serial}", "END"]


# ---- register codecs ---------------------------------------------------------------------
def _words(data: bytes, word_order: WordOrder) -> list[int]:
    words = [int.from_bytes(data[i : i + 2], "big") for i in range(0, len(data), 2)]
    return words if word_order == "big" else list(reversed(words))


def encode_u32(value: int, word_order: WordOrder = "big") -> list[int]:
    return _words(struct.pack(">I", value & 0xFFFFFFFF), word_order)


def encode_i32(value: int, word_order: WordOrder = "big") -> list[int]:
    value = max(-(2**31), min(2**31 - 1, value))
    return _words(struct.pack(">i", value), word_order)


def encode_f32(value: float, word_order: WordOrder = "big") -> list[int]:
    return _words(struct.pack(">f", value), word_order)


def encode_i16(value: int) -> list[int]:
    value = max(-(2**15), min(2**15 - 1, value))
    return [value & 0xFFFF]


def encode_u16(value: int) -> list[int]:
    return [max(0, min(0xFFFF, value))]


def encode_string(
    text: str, registers: int, byte_order: Literal["high", "low"] = "high"
) -> list[int]:
    """ASCII, 2 characters a register, NUL padded; ``low``: first character in the low byte."""
    data = text.encode("ascii")[: registers * 2].ljust(registers * 2, b"\0")
    order: Literal["big", "little"] = "big" if byte_order == "high" else "little"
    return [int.from_bytes(data[i : i + 2], order) for i in range(0, len(data), 2)]


def decode_string(regs: list[int], byte_order: Literal["high", "low"] = "high") -> str:
    order: Literal["big", "little"] = "big" if byte_order == "high" else "little"
    data = b"".join(r.to_bytes(2, order) for r in regs)
    return data.rstrip(b"\0").decode("ascii")


def _f32(value: float) -> float:
    """The double a float32 register pair reads back as."""
    return float(struct.unpack(">f", struct.pack(">f", value))[0])


@dataclass(frozen=True, slots=True)
class RegisterMap:
    """Addresses and layout of one Modbus station type (see sim/README.md)."""

    function: int  # 3 holding, 4 input
    ring_base: int
    ring_stride: int
    ring_depth: int
    slot_length: int
    calibration_address: int
    calibration_length: int
    word_order: WordOrder
    size: int  # registers served from address 0

    def slot_address(self, cycle: int) -> int:
        return self.ring_base + self.ring_stride * (cycle % self.ring_depth)


MBTCP = RegisterMap(3, 100, 32, 8, 30, 400, 16, "big", 416)
MBRTU = RegisterMap(4, 1000, 32, 4, 25, 2000, 15, "little", 2015)

_TCP_STATE = {
    "idle": 0,
    "fill": 1,
    "stabilise": 2,
    "test": 3,
    "vent": 4,
    "calibrating": 5,
    "fault": 8,
}
_RTU_STATE = {
    "idle": 0,
    "fill": 1,
    "stabilise": 1,
    "test": 1,
    "vent": 1,
    "calibrating": 2,
    "fault": 3,
}
_TCP_VERDICT = {Verdict.PASS: 1, Verdict.REJECT: 2, Verdict.GROSS: 3, Verdict.ABORTED: 4}
_RTU_VERDICT = {
    Verdict.PASS: 0x01,
    Verdict.REJECT: 0x02,
    Verdict.GROSS: 0x04,
    Verdict.ABORTED: 0x08,
}
_MBARLS = "mbar*L/s"
_RTU_LEAK_STEP = to_canonical(1e-5, _MBARLS, "leak")
RTU_NONE = -(2**31)


def modbus_state(kind: str, state: str) -> int:
    return (_TCP_STATE if kind == "lf-mbtcp" else _RTU_STATE)[state]


def _unix(t: datetime) -> int:
    return int(t.timestamp())


def modbus_result(kind: str, r: SimResult) -> Encoded:
    """The ring slot of a result (registers from the slot's address)."""
    ts = _unix(r.station_time)
    ended = _iso(datetime.fromtimestamp(ts, UTC))
    base = {
        "cycle": r.cycle,
        "ended_at": ended,
        "program": r.program,
        "part_id": r.part_id,
        "verdict": r.verdict.value,
    }
    if kind == "lf-mbtcp":
        wo: WordOrder = "big"
        lower = math.nan if r.lower_limit_sccm is None else r.lower_limit_sccm
        temp = round(r.temperature_c * 100)
        regs = (
            encode_u32(r.cycle, wo)
            + encode_u32(ts, wo)
            + encode_u16(r.program_no)
            + encode_u16(_TCP_VERDICT[r.verdict])
            + encode_f32(from_canonical(r.test_pressure_pa, "kPa", "pressure"), wo)
            + encode_f32(r.pressure_loss_pa, wo)
            + encode_f32(r.leak_rate_sccm, wo)
            + encode_f32(r.reject_limit_sccm, wo)
            + encode_f32(lower, wo)
            + encode_u16(round(r.fill_s * 10))
            + encode_u16(round(r.stabilise_s * 10))
            + encode_u16(round(r.test_s * 10))
            + encode_i16(temp)
            + encode_string(r.part_id or "", 8, "high")
            + encode_u32(r.cycle, wo)
        )
        reported = base | {
            "test_pressure_pa": to_canonical(
                _f32(from_canonical(r.test_pressure_pa, "kPa", "pressure")), "kPa", "pressure"
            ),
            "pressure_loss_pa": _f32(r.pressure_loss_pa),
            "leak_rate_sccm": _f32(r.leak_rate_sccm),
            "reject_limit_sccm": _f32(r.reject_limit_sccm),
            "lower_limit_sccm": None if r.lower_limit_sccm is None else _f32(r.lower_limit_sccm),
            "fill_s": round(r.fill_s * 10) / 10,
            "stabilise_s": round(r.stabilise_s * 10) / 10,
            "test_s": round(r.test_s * 10) / 10,
            "temperature_c": temp / 100,
        }
        resolution = {
            "ended_at": 1.0,
            "fill_s": 0.1,
            "stabilise_s": 0.1,
            "test_s": 0.1,
            "temperature_c": 0.01,
        }
        resolution |= {
            k: 0.0
            for k in (
                "test_pressure_pa",
                "pressure_loss_pa",
                "leak_rate_sccm",
                "reject_limit_sccm",
                "lower_limit_sccm",
            )
        }
    else:
        wo = "little"
        mbar = round(from_canonical(r.test_pressure_pa, "mbar", "pressure"))
        loss = round(r.pressure_loss_pa * 100)
        leak = round(from_canonical(r.leak_rate_sccm, _MBARLS, "leak") * 1e5)
        limit = round(from_canonical(r.reject_limit_sccm, _MBARLS, "leak") * 1e5)
        lower = (
            RTU_NONE
            if r.lower_limit_sccm is None
            else round(from_canonical(r.lower_limit_sccm, _MBARLS, "leak") * 1e5)
        )
        temp = round(r.temperature_c * 10)
        regs = (
            encode_u32(r.cycle, wo)
            + encode_u32(ts, wo)
            + encode_u16(r.program_no)
            + encode_u16(_RTU_VERDICT[r.verdict])
            + encode_u16(mbar)
            + encode_i32(loss, wo)
            + encode_i32(leak, wo)
            + encode_i32(limit, wo)
            + encode_i32(lower, wo)
            + encode_u16(round(r.fill_s * 10))
            + encode_u16(round(r.stabilise_s * 10))
            + encode_u16(round(r.test_s * 10))
            + encode_i16(temp)
            + encode_string(r.part_id or "", 4, "low")
            + encode_u32(r.cycle, wo)
        )
        reported = base | {
            "test_pressure_pa": to_canonical(mbar, "mbar", "pressure"),
            "pressure_loss_pa": loss / 100,
            "leak_rate_sccm": to_canonical(leak * 1e-5, _MBARLS, "leak"),
            "reject_limit_sccm": to_canonical(limit * 1e-5, _MBARLS, "leak"),
            "lower_limit_sccm": None
            if lower == RTU_NONE
            else to_canonical(lower * 1e-5, _MBARLS, "leak"),
            "fill_s": round(r.fill_s * 10) / 10,
            "stabilise_s": round(r.stabilise_s * 10) / 10,
            "test_s": round(r.test_s * 10) / 10,
            "temperature_c": temp / 10,
        }
        resolution = {
            "ended_at": 1.0,
            "test_pressure_pa": 100.0,
            "pressure_loss_pa": 0.01,
            "leak_rate_sccm": _RTU_LEAK_STEP,
            "reject_limit_sccm": _RTU_LEAK_STEP,
            "lower_limit_sccm": _RTU_LEAK_STEP,
            "fill_s": 0.1,
            "stabilise_s": 0.1,
            "test_s": 0.1,
            "temperature_c": 0.1,
        }
    return Encoded(regs, reported, resolution)


def modbus_calibration(kind: str, c: SimCalibration) -> Encoded:
    """The calibration block (registers from its address)."""
    ts = _unix(c.station_time)
    base: dict[str, Any] = {
        "ended_at": _iso(datetime.fromtimestamp(ts, UTC)),
        "program": c.program,
        "passed": c.passed,
    }
    if kind == "lf-mbtcp":
        wo: WordOrder = "big"
        ref_kpa = from_canonical(c.standard_ref_pressure_pa, "kPa", "pressure")
        regs = (
            encode_u32(c.counter, wo)
            + encode_u32(ts, wo)
            + encode_u16(c.program_no)
            + encode_u16(1 if c.passed else 0)
            + encode_f32(c.master_loss_pa, wo)
            + encode_f32(c.standard_loss_pa, wo)
            + encode_f32(c.standard_sccm, wo)
            + encode_f32(ref_kpa, wo)
            + encode_u32(c.counter, wo)
        )
        master, standard, flow = (
            _f32(c.master_loss_pa),
            _f32(c.standard_loss_pa),
            _f32(c.standard_sccm),
        )
        ref = to_canonical(_f32(ref_kpa), "kPa", "pressure")
        resolution = {"ended_at": 1.0}
        resolution |= {
            k: 0.0
            for k in (
                "master_loss_pa",
                "standard_loss_pa",
                "standard_sccm",
                "standard_ref_pressure_pa",
            )
        }
    else:
        wo = "little"
        m = round(c.master_loss_pa * 100)
        s = round(c.standard_loss_pa * 100)
        f = round(from_canonical(c.standard_sccm, _MBARLS, "leak") * 1e5)
        p = round(from_canonical(c.standard_ref_pressure_pa, "mbar", "pressure"))
        regs = (
            encode_u32(c.counter, wo)
            + encode_u32(ts, wo)
            + encode_u16(c.program_no)
            + encode_u16(1 if c.passed else 0)
            + encode_i32(m, wo)
            + encode_i32(s, wo)
            + encode_i32(f, wo)
            + encode_u16(p)
            + encode_u32(c.counter, wo)
        )
        master, standard = m / 100, s / 100
        flow = to_canonical(f * 1e-5, _MBARLS, "leak")
        ref = to_canonical(p, "mbar", "pressure")
        resolution = {
            "ended_at": 1.0,
            "master_loss_pa": 0.01,
            "standard_loss_pa": 0.01,
            "standard_sccm": _RTU_LEAK_STEP,
            "standard_ref_pressure_pa": 100.0,
        }
    reported = base | {
        "master_loss_pa": master,
        "standard_loss_pa": standard,
        "standard_sccm": flow,
        "standard_ref_pressure_pa": ref,
        "ratio": standard / master if master > 0 else None,
        "sensitivity": _sensitivity(flow, master, standard),
    }
    return Encoded(regs, reported, resolution)
