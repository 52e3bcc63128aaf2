"""Display units and number formatting (pure). The store is canonical (Pa, sccm); pages convert
only what they show, through gateway.units, so every unit name means what it means there."""

from __future__ import annotations

import math
from dataclasses import dataclass

import pandas as pd

from gateway.units import from_canonical

__all__ = ["LEAK_UNITS", "PRESSURE_UNITS", "Units", "fmt"]

PRESSURE_UNITS = ("Pa", "kPa", "mbar", "psi")
LEAK_UNITS = ("sccm", "mbar*L/s", "Pa*m3/s")
_LABELS = {"mbar*L/s": "mbar·L/s", "Pa*m3/s": "Pa·m³/s"}


def fmt(value: object, digits: int = 3) -> str:
    """Short human number: 3 significant digits, scientific for tiny or huge magnitudes."""
    if value is None or value is pd.NA:
        return "–"
    try:
        x = float(value)  # type: ignore[arg-type]
    except (TypeError, ValueError):
        return str(value)
    if not math.isfinite(x):
        return "–"
    if x != 0 and (abs(x) < 1e-3 or abs(x) >= 1e6):
        return f"{x:.{digits - 1}e}"
    return f"{x:.{digits}g}"


@dataclass(frozen=True)
class Units:
    """The user's display units; ``p``/``q`` convert canonical pressures/leak rates."""

    pressure: str = "Pa"
    leak: str = "sccm"

    @property
    def p_factor(self) -> float:
        return from_canonical(1.0, self.pressure, "pressure")

    @property
    def q_factor(self) -> float:
        return from_canonical(1.0, self.leak, "leak")

    @property
    def p_label(self) -> str:
        return _LABELS.get(self.pressure, self.pressure)

    @property
    def q_label(self) -> str:
        return _LABELS.get(self.leak, self.leak)

    def p(self, value: float | None) -> float | None:
        return None if value is None or pd.isna(value) else float(value) * self.p_factor

    def q(self, value: float | None) -> float | None:
        return None if value is None or pd.isna(value) else float(value) * self.q_factor

    def frame(self, df: pd.DataFrame) -> pd.DataFrame:
        """A copy with pressure (``*_pa``) and leak (``*_sccm``) columns in display units,
        renamed to say so."""
        out = df.copy()
        renames = {}
        for col in df.columns:
            if col.endswith("_pa"):
                out[col] = pd.to_numeric(df[col], errors="coerce") * self.p_factor
                renames[col] = f"{col[:-3]} [{self.p_label}]"
            elif col.endswith("_sccm"):
                out[col] = pd.to_numeric(df[col], errors="coerce") * self.q_factor
                renames[col] = f"{col[:-5]} [{self.q_label}]"
        return out.rename(columns=renames)
