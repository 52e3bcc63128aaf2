"""Leak-rate bases and the decay calculator, checked against first principles.

Outside sources: the ideal gas law p·V = n·R·T with R from scipy.constants (CODATA 2018) and
unit arithmetic by pint; the standard atmosphere 101 325 Pa (NIST SP 811). The convention
that a pV throughput counts gas at the basis temperature is ISO 3529-1's "pV flow at a
specified temperature" (gateway/units.py).
"""

from __future__ import annotations

import json

import pint
import pytest
from scipy import constants

from gateway.cli import main
from gateway.units import convert, from_canonical, to_canonical

UREG = pint.UnitRegistry()
Q_ = UREG.Quantity
P_STD = Q_(101_325, "Pa")


def _kelvin(celsius: float) -> pint.Quantity:
    return Q_(celsius, "degC").to("K")


def _loss_first_principles(leak_sccm: float, basis_c: float, gas_c: float, volume_cc: float,
                           seconds: float) -> float:
    """Moles per second from the standard volume flow on its basis, then the pressure they
    make in the part's volume at the gas temperature."""
    flow = Q_(leak_sccm, "cm**3/min")
    R = Q_(constants.R, "J/(mol*K)")
    moles = (P_STD * flow * Q_(seconds, "s") / (R * _kelvin(basis_c))).to("mol")
    return float((moles * R * _kelvin(gas_c) / Q_(volume_cc, "cm**3")).to("Pa").magnitude)


def _calc(capsys: pytest.CaptureFixture[str], *args: str) -> dict[str, float]:
    assert main(["calc", *args, "--json"]) == 0
    return json.loads(capsys.readouterr().out)  # type: ignore[no-any-return]


@pytest.mark.parametrize(("basis", "gas"), [(0.0, 20.0), (20.0, 20.0), (20.0, 35.0), (0.0, 0.0)])
def test_decay_applies_the_basis_once(capsys: pytest.CaptureFixture[str], basis: float,
                                      gas: float) -> None:
    doc = _calc(capsys, "decay", "--volume", "250cc", "--leak", "2sccm", "--test-time", "10s",
                "--reference", f"{basis:g}", "--gas-temperature", f"{gas:g}C")
    assert doc["loss_pa"] == pytest.approx(_loss_first_principles(2.0, basis, gas, 250, 10),
                                           rel=1e-9)
    assert doc["leak_as_given_sccm"] == pytest.approx(2.0)
    assert doc["leak_sccm_reference_c"] == 0.0 and doc["reference_c"] == basis
    back = _calc(capsys, "test-time", "--volume", "250cc", "--leak", "2sccm", "--loss",
                 f"{doc['loss_pa']!r}Pa", "--reference", f"{basis:g}", "--gas-temperature",
                 f"{gas:g}C")
    assert back["test_time_s"] == pytest.approx(10.0, rel=1e-9)


def test_the_gas_is_at_room_temperature_unless_told(capsys: pytest.CaptureFixture[str]) -> None:
    doc = _calc(capsys, "decay", "--volume", "250cc", "--leak", "2sccm", "--test-time", "10s")
    assert doc["gas_temperature_c"] == 20.0
    assert doc["loss_pa"] == pytest.approx(_loss_first_principles(2.0, 0.0, 20.0, 250, 10))


@pytest.mark.parametrize("unit", ["Pa*m3/s", "mbar*L/s", "Torr*L/s"])
@pytest.mark.parametrize("basis", [0.0, 20.0])
def test_a_throughput_is_an_amount_of_gas_at_the_basis_temperature(unit: str,
                                                                   basis: float) -> None:
    pint_unit = {"Pa*m3/s": "Pa*m**3/s", "mbar*L/s": "mbar*L/s", "Torr*L/s": "torr*L/s"}[unit]
    # pV at P_std is the standard volume, at the same temperature (pint does the units)
    standard = float((Q_(1.0, pint_unit) / P_STD).to("cm**3/min").magnitude)
    # on its own basis the throughput reads as that many sccm, on either basis
    assert convert(1.0, unit, "sccm", "leak", from_reference_c=basis,
                   to_reference_c=basis) == pytest.approx(standard, rel=1e-9)
    # and in canonical sccm (0 °C) it is scaled by T_0/T_basis (Charles's law), like sccm
    ratio = float((_kelvin(0.0) / _kelvin(basis)).magnitude)
    assert to_canonical(1.0, unit, "leak", reference_c=basis) == pytest.approx(
        standard * ratio, rel=1e-9)
    assert from_canonical(standard * ratio, unit, "leak", reference_c=basis) == pytest.approx(1.0)


def test_calc_convert_and_a_profile_agree(capsys: pytest.CaptureFixture[str]) -> None:
    import tomllib
    from datetime import UTC, datetime
    from pathlib import Path

    from gateway.profiles import StationContext, parse_profile
    from gateway.profiles.decoders import serial_parser

    doc = _calc(capsys, "convert", "1", "mbar*L/s", "sccm", "--from-reference", "20",
                "--to-reference", "0")
    text = (Path(__file__).resolve().parents[2] / "gateway/profiles/builtin/lf-noclock.toml"
            ).read_text()
    profile_doc = tomllib.loads(text)
    profile_doc["profile"]["leak_reference_c"] = 20
    profile_doc["result"]["fields"]["leak_rate_sccm"]["unit"] = "mbar*L/s"
    profile = parse_profile(profile_doc, "t.toml")
    import binascii

    payload = "7 P01 1.00 3.0 PASS"
    line = f"{payload} *{binascii.crc_hqx(payload.encode(), 0xFFFF):04X}"
    assert profile.serial is not None
    [record] = serial_parser(profile.serial, StationContext("S", "L")).parse(
        [line], 1, datetime.now(UTC))
    assert record.leak_rate_sccm == pytest.approx(doc["value"], rel=1e-12)  # type: ignore[union-attr]
