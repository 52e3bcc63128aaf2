"""A leak standard used off its certificate pressure is flagged with the flow it gives there.

Model: viscous (laminar) flow of an ideal gas through a capillary, Q ∝ p_in² − p_out² with
absolute pressures (Hagen–Poiseuille for a compressible gas; common practice for capillary
leak standards). The check recomputes it with pint quantities from the absolute pressures.
"""

from __future__ import annotations

from datetime import UTC, date, datetime

import pandas as pd
import pint
import pytest

from analytics.audit import LeakStandard
from analytics.standard_use import laminar_flow_factor, pressure_mismatch

Q_ = pint.UnitRegistry().Quantity


def test_a_quarter_more_flow_fifty_kpa_above_the_certificate() -> None:
    atm = Q_(101.325, "kPa")
    cert, use = Q_(350, "kPa") + atm, Q_(400, "kPa") + atm  # gauge to absolute
    expected = ((use**2 - atm**2) / (cert**2 - atm**2)).to("").magnitude
    factor = laminar_flow_factor(400_000.0, 350_000.0)
    assert factor == pytest.approx(expected, rel=1e-12)
    assert factor == pytest.approx(1.246, abs=0.002)  # "roughly a quarter"
    assert laminar_flow_factor(350_000.0, 350_000.0) == pytest.approx(1.0)


def test_the_register_flags_the_station_that_tests_above_the_certificate() -> None:
    std = LeakStandard("LS-1", "S1", 3.0, 350_000.0, date(2026, 3, 1), interval_months=12)
    ok = LeakStandard("LS-2", "S2", 3.0, 350_000.0, date(2026, 3, 1), interval_months=12)
    t = datetime(2026, 12, 3, tzinfo=UTC)
    results = pd.DataFrame([
        {"station": "S1", "program": "P", "ended_at": t, "test_pressure_pa": 400_000.0},
        {"station": "S1", "program": "P", "ended_at": t, "test_pressure_pa": 401_000.0},
        {"station": "S2", "program": "P", "ended_at": t, "test_pressure_pa": 350_500.0},
    ])
    [m] = pressure_mismatch(results, [std, ok])
    assert (m.serial, m.station) == ("LS-1", "S1") and m.flow_factor > 1.2
    assert "laminar" in m.model and "+25%" in m.message
