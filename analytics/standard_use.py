"""Is a leak standard used at the pressure on its certificate? (pure)

A calibrated leak's flow holds at the pressure it was certified at. A capillary standard is a
viscous (laminar) leak: the flow of a compressible gas through it goes with the difference of
the squares of the absolute pressures either side, Q ∝ p_in² − p_out² (Hagen–Poiseuille for
an ideal gas; common practice for capillary leak standards). Used above its certificate
pressure it lets more gas through than its nominal flow, and every calibration with it reads
the span too large: a standard certified at 350 kPa used at 400 kPa (gauge) gives about a
quarter more. ``pressure_mismatch`` flags each station/program whose test pressure is off the
certificate by more than ``tolerance`` in flow, with the estimate and the model named.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass

import pandas as pd

from analytics._result import ResultMixin
from analytics.audit import LeakStandard

__all__ = ["MODEL", "PressureMismatch", "laminar_flow_factor", "pressure_mismatch"]

P_ATM_PA = 101_325.0  # the outlet of a standard venting to atmosphere (NIST SP 811)
MODEL = "laminar (viscous) flow: Q ∝ p_abs² − p_atm²"


def laminar_flow_factor(use_gauge_pa: float, certificate_gauge_pa: float,
                        atmosphere_pa: float = P_ATM_PA) -> float:
    """Flow at the use pressure over the flow at the certificate pressure (gauge pressures)."""
    use, cert = use_gauge_pa + atmosphere_pa, certificate_gauge_pa + atmosphere_pa
    denominator = cert**2 - atmosphere_pa**2
    if denominator <= 0:
        raise ValueError("the certificate pressure must be above atmosphere")
    return (use**2 - atmosphere_pa**2) / denominator


@dataclass(frozen=True, slots=True)
class PressureMismatch(ResultMixin):
    serial: str
    station: str
    program: str
    certificate_pressure_pa: float
    use_pressure_pa: float
    flow_factor: float  # flow at the use pressure / nominal flow
    model: str
    message: str


def pressure_mismatch(results: pd.DataFrame, standards: Sequence[LeakStandard],
                      tolerance: float = 0.05) -> list[PressureMismatch]:
    """One entry per station/program whose median test pressure puts its registered standard's
    flow more than ``tolerance`` (a share) off the nominal."""
    if results.empty or "test_pressure_pa" not in results:
        return []
    out = []
    by_station = {s.station: s for s in standards}
    pressures = pd.to_numeric(results["test_pressure_pa"], errors="coerce")
    frame = results.assign(_p=pressures).dropna(subset=["_p"])
    for (station, program), g in frame.groupby(["station", "program"], sort=True):
        std = by_station.get(str(station))
        if std is None or std.reference_pressure_pa <= 0:
            continue
        use = float(g["_p"].median())
        factor = laminar_flow_factor(use, std.reference_pressure_pa)
        if abs(factor - 1.0) <= tolerance:
            continue
        message = (f"{std.serial} certified at {std.reference_pressure_pa / 1000:g} kPa, used at "
                   f"{use / 1000:.4g} kPa by {program}: its flow there is about "
                   f"{factor - 1.0:+.0%} of nominal ({MODEL}); calibrations with it misread "
                   "the span by as much")
        out.append(PressureMismatch(std.serial, str(station), str(program),
                                    std.reference_pressure_pa, use, factor, MODEL, message))
    return out
