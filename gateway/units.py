"""Units for pressure, leak rate, volume, time and temperature.

Canonical units: Pa, sccm (standard cm³/min at 0 °C and 101.325 kPa), m³, s, °C.

One convention for every leak unit: a leak rate is an amount of gas per time, and a value is
on a basis, the reference temperature (0 or 20 °C) at which its gas volume is counted. For
standard-volume units (sccm, sccs, slm) that is the temperature of the standard volume; for
pV-throughput units (mbar·L/s, Pa·m³/s, Torr·L/s) it is the temperature of the gas whose p·V is
counted, since a throughput is an amount of gas only at a stated temperature (ISO 3529-1,
vacuum vocabulary: throughput is pV flow at a specified temperature). So on either basis
1 Pa·m³/s = 6e7/101325 sccm (the pV at P_std is the standard volume, at the same
temperature), and moving a value from the 20 °C to the 0 °C basis multiplies every leak unit
by 273.15/293.15 alike. ``calc convert --from-reference/--to-reference`` and a profile's
``leak_reference_c`` follow this one rule.
"""

from __future__ import annotations

import functools
import math
import re
from collections.abc import Callable
from dataclasses import dataclass
from typing import Literal

from gateway.errors import UnitError

__all__ = [
    "KELVIN_OFFSET",
    "P_STD_PA",
    "T_STD_K",
    "Kind",
    "Quantity",
    "convert",
    "convert_leak",
    "convert_pressure",
    "from_canonical",
    "known_units",
    "leak_to_sccm",
    "normalise_unit",
    "parse_quantity",
    "pressure_to_pa",
    "reference_temperature_k",
    "same_value",
    "sccm_to",
    "to_canonical",
    "to_canonical_fn",
    "unit_label",
]

Kind = Literal["pressure", "leak", "volume", "time", "temperature"]

KELVIN_OFFSET = 273.15
P_STD_PA = 101_325.0  # standard atmosphere (NIST SP 811)
T_STD_K = 273.15  # 0 °C reference for sccm
PSI_PA = 6894.757293168  # NIST SP 811
TORR_PA = P_STD_PA / 760.0
MMHG_PA = 133.322387415  # conventional millimetre of mercury
INH2O_PA = 249.08891  # conventional inch of water (4 °C)

# One pV throughput unit, in Pa·m³/s, to sccm when pV is taken at the reference temperature.
_PAM3S_TO_SCCM = 1e6 * 60.0 / P_STD_PA

# Factors to the canonical unit of each kind, keyed by the canonical spelling.
_FACTORS: dict[Kind, dict[str, float]] = {
    "pressure": {
        "Pa": 1.0,
        "kPa": 1e3,
        "MPa": 1e6,
        "bar": 1e5,
        "mbar": 1e2,
        "psi": PSI_PA,
        "inH2O": INH2O_PA,
        "Torr": TORR_PA,
        "mmHg": MMHG_PA,
        "atm": P_STD_PA,
    },
    "leak": {
        "sccm": 1.0,
        "sccs": 60.0,  # atm·cc/s
        "slm": 1000.0,
        "mbar*L/s": 1e-1 * _PAM3S_TO_SCCM,
        "Pa*m3/s": _PAM3S_TO_SCCM,
        "Torr*L/s": TORR_PA * 1e-3 * _PAM3S_TO_SCCM,
    },
    "volume": {
        "m3": 1.0,
        "L": 1e-3,
        "mL": 1e-6,
        "cc": 1e-6,
        "in3": 0.0254**3,
    },
    "time": {"s": 1.0, "ms": 1e-3, "min": 60.0, "h": 3600.0},
    "temperature": {"C": 1.0, "K": 1.0},  # handled as offsets below
}

# Every leak unit is on a basis (see the module docstring): all change with the reference.
_STANDARD_VOLUME_UNITS = frozenset(_FACTORS["leak"])

_ALIASES: dict[Kind, dict[str, str]] = {
    "pressure": {
        "pa": "Pa", "kpa": "kPa", "mpa": "MPa", "bar": "bar", "mbar": "mbar", "psi": "psi",
        "psig": "psi", "inh2o": "inH2O", "inwc": "inH2O", '"h2o': "inH2O", "torr": "Torr",
        "mmhg": "mmHg", "atm": "atm", "hpa": "mbar",
    },
    "leak": {
        "sccm": "sccm", "ccm": "sccm", "cc/min": "sccm", "scc/min": "sccm", "sccs": "sccs",
        "atm*cc/s": "sccs", "atmcc/s": "sccs", "scc/s": "sccs", "cc/s": "sccs", "slm": "slm",
        "slpm": "slm", "l/min": "slm", "mbar*l/s": "mbar*L/s", "mbarl/s": "mbar*L/s",
        "pa*m3/s": "Pa*m3/s", "pa*m^3/s": "Pa*m3/s", "pam3/s": "Pa*m3/s",
        "torr*l/s": "Torr*L/s", "torrl/s": "Torr*L/s",
    },
    "volume": {
        "m3": "m3", "m^3": "m3", "l": "L", "ml": "mL", "cc": "cc", "cm3": "cc", "cm^3": "cc",
        "in3": "in3", "in^3": "in3", "cuin": "in3",
    },
    "time": {
        "s": "s", "sec": "s", "second": "s", "seconds": "s", "ms": "ms", "min": "min",
        "minute": "min", "minutes": "min", "h": "h", "hr": "h", "hour": "h", "hours": "h",
    },
    "temperature": {"c": "C", "°c": "C", "degc": "C", "k": "K"},
}

_NUMBER = re.compile(r"^\s*([-+]?(?:\d+\.?\d*|\.\d+)(?:[eE][-+]?\d+)?)\s*(.*?)\s*$")


_PRINTED = {"mbar*L/s": "mbar·L/s", "Pa*m3/s": "Pa·m³/s"}


def unit_label(unit: str) -> str:
    """A unit as people read it on a page (``mbar*L/s`` → ``mbar·L/s``)."""
    return _PRINTED.get(unit, unit)


def reference_temperature_k(reference_c: float) -> float:
    """Reference temperature in K; only the two bases the trade uses are allowed."""
    if reference_c not in (0.0, 20.0):
        raise UnitError(f"reference temperature must be 0 or 20 °C, got {reference_c}")
    return reference_c + KELVIN_OFFSET


@functools.lru_cache(maxsize=512)  # called per value of every parsed line: cache the spelling
def _key(unit: str) -> str:
    text = unit.strip().replace("·", "*").replace("⋅", "*").replace("³", "3").replace(" ", "*")
    text = re.sub(r"\*+", "*", text)
    return text.lower().replace("*/", "/")


def known_units(kind: Kind) -> list[str]:
    return list(_FACTORS[kind])


def normalise_unit(unit: str, kind: Kind) -> str:
    """Canonical spelling of ``unit`` for ``kind``, or a UnitError listing the known ones."""
    key = _key(unit)
    aliases = _ALIASES[kind]
    canonical = aliases.get(key) or aliases.get(key.replace("*", ""))
    if canonical is None:
        raise UnitError(f"unknown {kind} unit {unit!r}; known: {', '.join(known_units(kind))}")
    _check_prefix_case(unit.strip(), canonical)
    return canonical


def _check_prefix_case(text: str, canonical: str) -> None:
    """Spellings are matched without regard to case (old displays print "MBAR", "KPA"), except
    where the case of a metric prefix is the meaning: "mPa" (milli) is not "MPa" (mega). A
    spelling in mixed case whose first letter is m/M against the canonical's is refused."""
    if text.islower() or text.isupper() or not text[:1] or not canonical[:1]:
        return
    if text[0] in "mM" and canonical[0] in "mM" and text[0] != canonical[0]:
        raise UnitError(f"{text!r}: the case of a metric prefix matters (m = milli, M = mega); "
                        f"write {canonical!r}")


def to_canonical(value: float, unit: str, kind: Kind, *, reference_c: float = 0.0) -> float:
    """Value in the canonical unit of ``kind`` (Pa, sccm at 0 °C, m³, s, °C)."""
    name = normalise_unit(unit, kind)
    if kind == "temperature":
        return value - KELVIN_OFFSET if name == "K" else value
    out = value * _FACTORS[kind][name]
    if kind == "leak" and name in _STANDARD_VOLUME_UNITS:
        out *= T_STD_K / reference_temperature_k(reference_c)
    return out


def same_value(value: float) -> float:
    """The conversion of a value already in its canonical unit."""
    return value


def to_canonical_fn(
    unit: str, kind: Kind, *, reference_c: float = 0.0
) -> Callable[[float], float]:
    """``to_canonical`` with ``unit`` resolved once, for a parser converting many values of it.

    Same arithmetic in the same order, so the results are identical bit for bit; a factor of
    exactly 1 (Pa, sccm at 0 °C, s, °C) is the identity. Raises UnitError now, not per value.
    """
    name = normalise_unit(unit, kind)
    if kind == "temperature":
        return (lambda v: v - KELVIN_OFFSET) if name == "K" else same_value
    factor = _FACTORS[kind][name]
    basis = 1.0
    if kind == "leak" and name in _STANDARD_VOLUME_UNITS:
        basis = T_STD_K / reference_temperature_k(reference_c)
    if basis != 1.0:
        return lambda v: v * factor * basis
    return same_value if factor == 1.0 else (lambda v: v * factor)


def from_canonical(value: float, unit: str, kind: Kind, *, reference_c: float = 0.0) -> float:
    name = normalise_unit(unit, kind)
    if kind == "temperature":
        return value + KELVIN_OFFSET if name == "K" else value
    out = value / _FACTORS[kind][name]
    if kind == "leak" and name in _STANDARD_VOLUME_UNITS:
        out *= reference_temperature_k(reference_c) / T_STD_K
    return out


def convert(
    value: float,
    from_unit: str,
    to_unit: str,
    kind: Kind,
    *,
    from_reference_c: float = 0.0,
    to_reference_c: float = 0.0,
) -> float:
    canonical = to_canonical(value, from_unit, kind, reference_c=from_reference_c)
    return from_canonical(canonical, to_unit, kind, reference_c=to_reference_c)


def pressure_to_pa(value: float, unit: str) -> float:
    return to_canonical(value, unit, "pressure")


def convert_pressure(value: float, from_unit: str, to_unit: str) -> float:
    return convert(value, from_unit, to_unit, "pressure")


def leak_to_sccm(value: float, unit: str, *, reference_c: float = 0.0) -> float:
    return to_canonical(value, unit, "leak", reference_c=reference_c)


def sccm_to(value_sccm: float, unit: str, *, reference_c: float = 0.0) -> float:
    return from_canonical(value_sccm, unit, "leak", reference_c=reference_c)


def convert_leak(
    value: float,
    from_unit: str,
    to_unit: str,
    *,
    from_reference_c: float = 0.0,
    to_reference_c: float = 0.0,
) -> float:
    return convert(
        value,
        from_unit,
        to_unit,
        "leak",
        from_reference_c=from_reference_c,
        to_reference_c=to_reference_c,
    )


def guess_kind(unit: str) -> Kind:
    """The kind a unit belongs to (used by ``calc convert``)."""
    for kind in ("pressure", "leak", "volume", "time", "temperature"):
        try:
            normalise_unit(unit, kind)
        except UnitError:
            continue
        return kind
    every = ", ".join(u for k in _FACTORS for u in known_units(k))
    raise UnitError(f"unknown unit {unit!r}; known: {every}")


@dataclass(frozen=True, slots=True)
class Quantity:
    """A parsed ``"<number> <unit>"`` string, already in the canonical unit of its kind."""

    value: float
    unit: str
    kind: Kind
    canonical: float


def parse_quantity(
    text: str,
    kind: Kind,
    *,
    default_unit: str | None = None,
    reference_c: float = 0.0,
) -> Quantity:
    """Parse ``"0.05 psi"``, ``"5sccm"``, ``"1.2e-3 mbar*l/s"``; a bare number needs a default."""
    match = _NUMBER.match(text or "")
    if not match:
        raise UnitError(f"cannot read a {kind} from {text!r}: expected a number and a unit")
    value = float(match.group(1))
    if not math.isfinite(value):
        raise UnitError(f"{text!r} is not a finite number")
    unit_text = match.group(2)
    if not unit_text:
        if default_unit is None:
            raise UnitError(
                f"{text!r} has no unit; add one of: {', '.join(known_units(kind))}"
            )
        unit_text = default_unit
    unit = normalise_unit(unit_text, kind)
    return Quantity(value, unit, kind, to_canonical(value, unit, kind, reference_c=reference_c))
