"""Wire formats of the streaming serial types lf-semi and lf-noclock (pure).

Each encoder returns the line (without its line end), what a reader can know from it in
canonical units (``reported``; None where the line leaves a value out) and the resolution of
each reported value, as ``sim.formats`` does for the first types. What a station does not send
is not reported: the gateway's config supplies it, and the e2e tests check that separately.
"""

from __future__ import annotations

import binascii
from datetime import datetime
from zoneinfo import ZoneInfo

from gateway.records import Verdict
from gateway.units import from_canonical, to_canonical
from sim.formats import Encoded, _fixed, _iso, _seconds
from sim.station import SimCalibration, SimResult

__all__ = [
    "noclock_calibration",
    "noclock_result",
    "semi_calibration",
    "semi_result",
    "semi_text",
    "ticket_calibration",
    "ticket_frame",
    "ticket_result",
]

# ---- lf-semi ------------------------------------------------------------------------------
SEMI_VERDICT = {Verdict.PASS: "OK", Verdict.REJECT: "NOK", Verdict.GROSS: "GROSS",
                Verdict.ABORTED: "ABORT"}
SEMI_CYCLES = 1_000_000  # six digits, zero-padded


def semi_text(value: float, decimals: int) -> str:
    """A number as the station prints it: decimal comma, points between thousands."""
    text = _fixed(value, decimals)
    sign = "-" if text.startswith("-") else ""
    whole, _, frac = text.lstrip("-").partition(".")
    groups: list[str] = []
    while len(whole) > 3:
        groups.insert(0, whole[-3:])
        whole = whole[:-3]
    groups.insert(0, whole)
    return sign + ".".join(groups) + ("," + frac if frac else "")


def _semi_exp(value: float) -> str:
    """Two decimals in scientific form with a decimal comma: ``8,50E-01``."""
    return f"{value:.2E}".replace(".", ",")


def _date_time(t: datetime, tz: ZoneInfo) -> tuple[list[str], datetime]:
    local = _seconds(t).astimezone(tz)
    return [local.strftime("%d.%m.%y"), local.strftime("%H:%M:%S")], local


def semi_result(r: SimResult, tz: ZoneInfo) -> Encoded:
    """``dd.mm.yy;HH:MM:SS;cycle;part;prog;pressure;loss;leak;verdict``: the pressure in mbar,
    the loss in Pa, the leak in sccm; a gross test leaves loss and leak empty, an aborted one
    every reading."""
    stamp, local = _date_time(r.station_time, tz)
    measured = r.verdict in (Verdict.PASS, Verdict.REJECT)
    mbar = from_canonical(r.test_pressure_pa, "mbar", "pressure")
    pressure = "" if r.verdict is Verdict.ABORTED else semi_text(mbar, 1)
    loss = semi_text(r.pressure_loss_pa, 2) if measured else ""
    leak = _semi_exp(r.leak_rate_sccm) if measured else ""
    cycle = r.cycle % SEMI_CYCLES
    fields = [*stamp, f"{cycle:06d}", r.part_id or "", str(r.program_no), pressure, loss, leak,
              SEMI_VERDICT[r.verdict]]
    reported = {
        "cycle": cycle,
        "ended_at": _iso(local),
        "program": r.program,
        "part_id": r.part_id or None,
        "verdict": r.verdict.value,
        "test_pressure_pa": to_canonical(round(mbar, 1), "mbar", "pressure") if pressure
        else None,
        "pressure_loss_pa": round(r.pressure_loss_pa, 2) if loss else None,
        "leak_rate_sccm": float(f"{r.leak_rate_sccm:.2E}") if leak else None,
    }
    resolution = {"ended_at": 1.0, "test_pressure_pa": 10.0, "pressure_loss_pa": 0.01,
                  "leak_rate_sccm": abs(r.leak_rate_sccm) * 0.01 + 1e-12}
    return Encoded(";".join(fields).encode("ascii"), reported, resolution)


def semi_calibration(c: SimCalibration, tz: ZoneInfo) -> Encoded:
    """``dd.mm.yy;HH:MM:SS;CAL;prog;master;standard;nominal;OK|NOK`` (Pa, Pa, sccm)."""
    stamp, local = _date_time(c.station_time, tz)
    fields = [*stamp, "CAL", str(c.program_no), semi_text(c.master_loss_pa, 2),
              semi_text(c.standard_loss_pa, 2), semi_text(c.standard_sccm, 3),
              "OK" if c.passed else "NOK"]
    reported = {
        "ended_at": _iso(local),
        "program": c.program,
        "master_loss_pa": round(c.master_loss_pa, 2),
        "standard_loss_pa": round(c.standard_loss_pa, 2),
        "standard_sccm": round(c.standard_sccm, 3),
        "passed": c.passed,
    }
    resolution = {"ended_at": 1.0, "master_loss_pa": 0.01, "standard_loss_pa": 0.01,
                  "standard_sccm": 0.001}
    return Encoded(";".join(fields).encode("ascii"), reported, resolution)


# ---- lf-noclock ---------------------------------------------------------------------------
NOCLOCK_VERDICT = {Verdict.PASS: "PASS", Verdict.REJECT: "FAIL", Verdict.GROSS: "GROSS",
                   Verdict.ABORTED: "ABORT"}
NOCLOCK_CYCLES = 100_000  # five digits on the display, counting again from 0


def _trailing(value: float, decimals: int) -> str:
    """The station prints a negative number with its minus after the digits: ``0.3-``."""
    text = _fixed(value, decimals)
    return text[1:] + "-" if text.startswith("-") else text


def _crc_line(payload: str) -> bytes:
    # CRC-16/CCITT-FALSE (poly 0x1021, init 0xFFFF) is what binascii.crc_hqx computes with
    # 0xFFFF as its start value (Python docs, binascii.crc_hqx; check value 0x29B1 for
    # "123456789" in the CRC catalogue)
    crc = binascii.crc_hqx(payload.encode("ascii"), 0xFFFF)
    return f"{payload} *{crc:04X}".encode("ascii")


def noclock_result(r: SimResult) -> Encoded:
    """``cycle program leak loss verdict *CRC``: leak in sccm (2 decimals), loss in Pa (1),
    ``---`` for readings a gross or aborted test does not have; no time, no part id."""
    measured = r.verdict in (Verdict.PASS, Verdict.REJECT)
    leak = _trailing(r.leak_rate_sccm, 2) if measured else "---"
    loss = _trailing(r.pressure_loss_pa, 1) if measured else "---"
    cycle = r.cycle % NOCLOCK_CYCLES
    payload = " ".join([str(cycle), r.program, leak, loss, NOCLOCK_VERDICT[r.verdict]])
    reported = {
        "cycle": cycle,
        "program": r.program,
        "verdict": r.verdict.value,
        "leak_rate_sccm": float(_fixed(r.leak_rate_sccm, 2)) if measured else None,
        "pressure_loss_pa": float(_fixed(r.pressure_loss_pa, 1)) if measured else None,
    }
    resolution = {"leak_rate_sccm": 0.01, "pressure_loss_pa": 0.1}
    return Encoded(_crc_line(payload), reported, resolution)


def noclock_calibration(c: SimCalibration) -> Encoded:
    """``program master standard nominal *CRC`` (Pa, Pa, sccm)."""
    payload = " ".join([c.program, _trailing(c.master_loss_pa, 1),
                        _trailing(c.standard_loss_pa, 1), _fixed(c.standard_sccm, 2)])
    reported = {
        "program": c.program,
        "master_loss_pa": float(_fixed(c.master_loss_pa, 1)),
        "standard_loss_pa": float(_fixed(c.standard_loss_pa, 1)),
        "standard_sccm": float(_fixed(c.standard_sccm, 2)),
    }
    resolution = {"master_loss_pa": 0.1, "standard_loss_pa": 0.1, "standard_sccm": 0.01}
    return Encoded(_crc_line(payload), reported, resolution)


# ---- lf-ticket ----------------------------------------------------------------------------
STX, ETX, NAK = "\x02", "\x03", "\x15"
TICKET_VERDICT = {Verdict.PASS: "PASS", Verdict.REJECT: "FAIL", Verdict.GROSS: "GROSS",
                  Verdict.ABORTED: "ABORT"}


def ticket_frame(lines: list[str]) -> bytes:
    """STX, the lines, ETX and the XOR of every byte after STX up to ETX as two hex digits.

    The XOR block check is what ``gateway.profiles.checks.xor8`` names; the sim computes it
    with ``functools.reduce`` over the same bytes the way the frame is written on the wire.
    """
    body = "\r\n".join(lines) + "\r\n" + ETX
    bcc = 0
    for byte in body.encode("ascii"):
        bcc ^= byte
    return (STX + body + f"{bcc:02X}\r\n").encode("ascii")


def _ticket_time(t: datetime, tz: ZoneInfo) -> tuple[list[str], datetime]:
    local = _seconds(t).astimezone(tz)
    return [f"DATE {local:%d/%m/%y}", f"TIME {local:%H:%M:%S}"], local


def ticket_result(r: SimResult, tz: ZoneInfo, address: int) -> Encoded:
    """A test ticket: address, kind, number, date and time (day first, local), program, part,
    test pressure (bar), loss (Pa), leak and reject limit (sccm), result; ``----`` for a
    reading the test does not have."""
    stamp, local = _ticket_time(r.station_time, tz)
    measured = r.verdict in (Verdict.PASS, Verdict.REJECT)
    bar = from_canonical(r.test_pressure_pa, "bar", "pressure")
    lines = [
        f"ADR {address:02d}", "KIND TEST", f"NO {r.cycle:06d}", *stamp, f"PROG {r.program}",
        f"PART {r.part_id or '----'}",
        f"PRESS {_fixed(bar, 3)}",
        f"LOSS {_fixed(r.pressure_loss_pa, 1) if measured else '----'}",
        f"LEAK {_fixed(r.leak_rate_sccm, 3) if measured else '----'}",
        f"LIMIT {_fixed(r.reject_limit_sccm, 3)}",
        f"RESULT {TICKET_VERDICT[r.verdict]}",
    ]
    reported = {
        "cycle": r.cycle,
        "ended_at": _iso(local),
        "program": r.program,
        "part_id": r.part_id or None,
        "verdict": r.verdict.value,
        "test_pressure_pa": to_canonical(float(_fixed(bar, 3)), "bar", "pressure"),
        "pressure_loss_pa": float(_fixed(r.pressure_loss_pa, 1)) if measured else None,
        "leak_rate_sccm": float(_fixed(r.leak_rate_sccm, 3)) if measured else None,
        "reject_limit_sccm": float(_fixed(r.reject_limit_sccm, 3)),
    }
    resolution = {"ended_at": 1.0, "test_pressure_pa": 100.0, "pressure_loss_pa": 0.1,
                  "leak_rate_sccm": 0.001, "reject_limit_sccm": 0.001}
    return Encoded(ticket_frame(lines), reported, resolution)


def ticket_calibration(c: SimCalibration, tz: ZoneInfo, address: int) -> Encoded:
    """A calibration ticket: master and standard loss (Pa), the standard's nominal flow (sccm)
    and the station's judgement."""
    stamp, local = _ticket_time(c.station_time, tz)
    lines = [
        f"ADR {address:02d}", "KIND CAL", *stamp, f"PROG {c.program}",
        f"MASTER {_fixed(c.master_loss_pa, 1)}", f"STD {_fixed(c.standard_loss_pa, 1)}",
        f"NOMINAL {_fixed(c.standard_sccm, 3)}", f"RESULT {'OK' if c.passed else 'FAIL'}",
    ]
    reported = {
        "ended_at": _iso(local),
        "program": c.program,
        "master_loss_pa": float(_fixed(c.master_loss_pa, 1)),
        "standard_loss_pa": float(_fixed(c.standard_loss_pa, 1)),
        "standard_sccm": float(_fixed(c.standard_sccm, 3)),
        "passed": c.passed,
    }
    resolution = {"ended_at": 1.0, "master_loss_pa": 0.1, "standard_loss_pa": 0.1,
                  "standard_sccm": 0.001}
    return Encoded(ticket_frame(lines), reported, resolution)
