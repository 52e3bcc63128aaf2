"""Checks of units, calibration and records against sources outside the project."""

from __future__ import annotations

import math
from datetime import UTC, datetime

import pint
import pytest
from scipy import constants

from gateway.calibration import Calibration, expected_loss_pa
from gateway.calibration import test_time_for_loss as time_for_loss
from gateway.cli import main
from gateway.records import TestResult
from gateway.units import convert, to_canonical

UREG = pint.UnitRegistry()
UREG.define("sccm = atm * cm**3 / min")  # sccm = atm·cm³/min at the reference temperature


@pytest.mark.parametrize(
    ("unit", "pint_unit"),
    [("psi", "psi"), ("kPa", "kPa"), ("bar", "bar"), ("mbar", "mbar"), ("Torr", "torr"),
     ("mmHg", "mmHg"), ("atm", "atm"), ("MPa", "MPa")],
)
def test_pressure_against_pint(unit: str, pint_unit: str) -> None:
    # Reference: pint's unit definitions (NIST SP 811 values).
    assert to_canonical(1.0, unit, "pressure") == pytest.approx(
        UREG.Quantity(1.0, pint_unit).to("Pa").magnitude, rel=1e-9
    )


@pytest.mark.parametrize(
    ("unit", "pint_unit"),
    [("mbar*L/s", "mbar*L/s"), ("Pa*m3/s", "Pa*m**3/s"), ("Torr*L/s", "torr*L/s"),
     ("sccs", "atm*cm**3/s"), ("slm", "atm*L/min")],
)
def test_leak_against_pint(unit: str, pint_unit: str) -> None:
    expected = UREG.Quantity(1.0, pint_unit).to("sccm").magnitude
    assert to_canonical(1.0, unit, "leak") == pytest.approx(expected, rel=1e-9)


def test_reference_temperature_basis() -> None:
    # 0 °C vs 20 °C bases differ by 293.15/273.15 (ideal gas, common practice).
    assert convert(1.0, "sccm", "sccm", "leak", to_reference_c=20.0) == pytest.approx(
        293.15 / 273.15
    )


@pytest.mark.parametrize("reference_c", [0.0, 20.0])
def test_decay_against_mole_balance(reference_c: float) -> None:
    # Independent ideal-gas check: n = pV/(RT) with scipy.constants.R.
    t_ref = 273.15 + reference_c
    volume, leak, dt = 120e-6, 5.0, 10.0
    mol_per_s = 101325.0 * (leak * 1e-6 / 60.0) / (constants.R * t_ref)
    expected = mol_per_s * dt * constants.R * t_ref / volume
    assert expected_loss_pa(volume, leak, dt, reference_c=reference_c) == pytest.approx(expected)
    assert time_for_loss(volume, leak, expected, reference_c=reference_c) == pytest.approx(dt)


def test_calibration_trade_example() -> None:
    # Common practice: master 0.05 psi, master + 5 sccm standard 0.15 psi.
    psi = 6894.757293168
    cal = Calibration(0.05 * psi, 0.15 * psi, 5.0)
    assert cal.ratio == pytest.approx(3.0)
    assert cal.leak_rate(0.05 * psi) == pytest.approx(0.0, abs=1e-12)
    assert cal.leak_rate(0.10 * psi) == pytest.approx(2.5)
    assert cal.leak_rate(0.04 * psi) == pytest.approx(-0.5)


def test_record_validation() -> None:
    now = datetime.now(UTC)
    ok = dict(station="s", line="l", cycle=1, ended_at=now, received_at=now, program="p",
              verdict="pass", test_pressure_pa=1e5, pressure_loss_pa=3.0, leak_rate_sccm=0.1,
              reject_limit_sccm=5.0, fill_s=1.0, stabilise_s=2.0, test_s=3.0)
    r = TestResult(**ok)  # type: ignore[arg-type]
    assert TestResult.from_dict(r.to_dict()) == r
    with pytest.raises(ValueError, match="test_s"):
        TestResult(**{**ok, "test_s": -1.0})  # type: ignore[arg-type]
    with pytest.raises(ValueError, match="finite"):
        TestResult(**{**ok, "pressure_loss_pa": math.nan})  # type: ignore[arg-type]
    with pytest.raises(ValueError, match="timezone"):
        TestResult(**{**ok, "ended_at": datetime(2026, 1, 1)})  # type: ignore[arg-type]


def test_calc_cli(capsys: pytest.CaptureFixture[str]) -> None:
    assert main(["calc", "convert", "1", "mbar*l/s", "sccm", "--json"]) == 0
    assert '"unit": "sccm"' in capsys.readouterr().out
    assert main(["calc", "convert", "1", "furlong", "sccm"]) == 2
