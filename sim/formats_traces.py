"""How the simulator's stations with curve output send a test's pressure curve (pure).

lf-delim sends one line after its record::

    T;<cycle>;<R|M|S>;<interval ms>;<stabilise>;<test>;<dump>;<sample kPa>;...

phase starts as sample indexes, samples in kPa gauge with four decimals (0.1 Pa, the
transducer's resolution). lf-mbtcp keeps the newest result's curve (it keeps no calibration
curves) in holding registers from
``TRACE_BASE`` (big-endian words), written before its counter is bumped::

    +0  counter (uint32, curves written since power-up)   +6  interval (ms)
    +2  cycle (uint32)                                    +7  stabilise start (sample index)
    +4  role (1 result, 2 master, 3 standard)             +8  test start
    +5  sample count                                      +9  dump start
    +10 samples, float32 kPa gauge, two registers each
"""

from __future__ import annotations

from gateway.units import from_canonical
from sim.formats import _fixed, encode_f32, encode_u32
from sim.traces import SimTrace

__all__ = ["TRACE_BASE", "TRACE_MAX", "TRACE_ROLE_CODES", "delim_trace", "mbtcp_trace",
           "trace_size"]

TRACE_BASE = 1000
TRACE_MAX = 1500  # samples the register block holds
TRACE_ROLE_CODES = {"result": 1, "master": 2, "standard": 3}
_DELIM_ROLE = {"result": "R", "master": "M", "standard": "S"}


def trace_size() -> int:
    """Registers an lf-mbtcp station with curve output serves (from address 0)."""
    return TRACE_BASE + 10 + 2 * TRACE_MAX


def _starts(tr: SimTrace) -> list[int]:
    at = dict(tr.phases)
    return [round(at[name] / tr.interval_s) for name in ("stabilise", "test", "dump")]


def delim_trace(role: str, cycle: int, tr: SimTrace) -> bytes:
    """The ``T;...`` line of one curve (without the line end)."""
    head = ["T", str(cycle), _DELIM_ROLE[role], f"{tr.interval_s * 1000:g}",
            *map(str, _starts(tr))]
    samples = [_fixed(from_canonical(p, "kPa", "pressure"), 4) for p in tr.pressures_pa]
    return ";".join(head + samples).encode("ascii")


def mbtcp_trace(counter: int, role: str, cycle: int, tr: SimTrace) -> list[int]:
    """The register block of one curve, from ``TRACE_BASE`` (at most ``TRACE_MAX`` samples)."""
    samples = tr.pressures_pa[:TRACE_MAX]
    regs = [*encode_u32(counter), *encode_u32(cycle), TRACE_ROLE_CODES[role], len(samples),
            round(tr.interval_s * 1000), *_starts(tr)]
    for p in samples:
        regs += encode_f32(from_canonical(p, "kPa", "pressure"))
    return regs
