"""Pure parts of the dashboard: settings from environment and config, display units."""

from __future__ import annotations

from datetime import date
from pathlib import Path

import pint
import pytest

from dashboard.display import Units, fmt
from dashboard.settings import load_settings, shifts_from_starts
from gateway.errors import ConfigError


@pytest.fixture(scope="module")
def ureg() -> pint.UnitRegistry:
    return pint.UnitRegistry()


def test_demo_config_gives_zone_site_and_shifts() -> None:
    s = load_settings({"LEAKFLEET_CONFIG": "demo", "LEAKFLEET_STORE": "sqlite:///x.db"})
    assert (s.site, s.timezone, s.store_url) == (
        "Northmere Works",
        "Europe/Berlin",
        "sqlite:///x.db",
    )
    assert s.shifts == (("early", "06:00", "14:00"), ("late", "14:00", "22:00"),
                        ("night", "22:00", "06:00"))  # fmt: skip
    assert s.clock == "wall"
    # the demo register: one standard per station, 350 kPa for L1 and 20 psi for L2
    # (1 psi = 6894.757293168 Pa, NIST SP 811 appendix B)
    assert len(s.standards) == 6
    first = s.standards[0]
    assert (first.serial, first.station, first.nominal_sccm) == ("LS-3021", "L1-S1", 3.0)
    assert first.reference_pressure_pa == pytest.approx(350_000.0)
    assert s.standards[-1].reference_pressure_pa == pytest.approx(20 * 6894.757293168)


def test_store_falls_back_to_the_config_then_the_default(tmp_path: Path) -> None:
    cfg = tmp_path / "plant.toml"
    cfg.write_text('site = "P"\nstore = "sqlite:///plant.db"\n')
    assert load_settings({"LEAKFLEET_CONFIG": str(cfg)}).store_url == "sqlite:///plant.db"
    assert load_settings({}).store_url == "sqlite:///./leakfleet.db"


def test_shift_starts_in_any_order_wrap_around() -> None:
    got = shifts_from_starts({"night": "22:00", "early": "06:00"}, "f")
    assert got == (("early", "06:00", "22:00"), ("night", "22:00", "06:00"))
    with pytest.raises(ConfigError, match="f: shifts: expected at least two"):
        shifts_from_starts({"only": "06:00"}, "f")


def test_standards_register(tmp_path: Path) -> None:
    cfg = tmp_path / "plant.toml"
    cfg.write_text(
        'site = "P"\ntimezone = "Europe/Berlin"\n'
        '[[standards]]\nserial = "LS-3021"\nstation = "L1-S1"\nnominal = "3 sccm"\n'
        'reference_pressure = "350 kPa"\ncertificate_date = 2026-01-31\ninterval_months = 1\n'
        "uncertainty_pct = 2.5\n"
    )
    (std,) = load_settings({"LEAKFLEET_CONFIG": str(cfg)}).standards
    assert std.nominal_sccm == 3.0 and std.reference_pressure_pa == 350_000.0
    assert std.due == date(2026, 2, 28)  # month-end clamp (analytics.add_months)
    cfg.write_text('[[standards]]\nserial = "X"\nstation = "S"\ncertificate_date = 2026-01-01\n')
    with pytest.raises(ConfigError, match=r"standards\[0\]\.nominal: a value \(required\)"):
        load_settings({"LEAKFLEET_CONFIG": str(cfg)})


def test_config_mistakes_are_one_line(tmp_path: Path) -> None:
    with pytest.raises(ConfigError, match="no such config file"):
        load_settings({"LEAKFLEET_CONFIG": str(tmp_path / "nope.toml")})
    bad = tmp_path / "bad.toml"
    bad.write_text('timezone = "Mars/Olympus"\n')
    with pytest.raises(ConfigError, match="timezone/shifts: shift calendar: unknown time zone"):
        load_settings({"LEAKFLEET_CONFIG": str(bad)})
    with pytest.raises(ConfigError, match="LEAKFLEET_CLOCK"):
        load_settings({"LEAKFLEET_CLOCK": "sundial"})


@pytest.mark.parametrize("unit", ["Pa", "kPa", "mbar", "psi"])
def test_pressure_units_agree_with_pint(unit: str, ureg: pint.UnitRegistry) -> None:
    # reference: pint's unit definitions
    expected = ureg.Quantity(1.0, "Pa").to(unit).magnitude
    assert Units(pressure=unit).p_factor == pytest.approx(expected, rel=1e-9)


@pytest.mark.parametrize(("unit", "pint_unit"), [("mbar*L/s", "mbar * L / s"),
                                                 ("Pa*m3/s", "Pa * m**3 / s")])  # fmt: skip
def test_leak_units_agree_with_pint(unit: str, pint_unit: str, ureg: pint.UnitRegistry) -> None:
    # 1 sccm is 1 cm³/min of gas at 101.325 kPa (0 °C): its pV throughput is
    # 101325 Pa · 1 cm³/min, converted by pint (definition of the standard cm³ per minute)
    pv = ureg.Quantity(101325.0, "Pa") * ureg.Quantity(1.0, "cm**3/min")
    assert Units(leak=unit).q_factor == pytest.approx(pv.to(pint_unit).magnitude, rel=1e-9)


def test_frame_relabels_converted_columns() -> None:
    import pandas as pd

    df = pd.DataFrame({"pressure_loss_pa": [100.0], "leak_rate_sccm": [2.0], "cycle": [1]})
    out = Units(pressure="mbar", leak="sccm").frame(df)
    assert list(out.columns) == ["pressure_loss [mbar]", "leak_rate [sccm]", "cycle"]
    assert out.iloc[0, 0] == pytest.approx(1.0)


def test_fmt() -> None:
    assert fmt(0.012345) == "0.0123"
    assert fmt(3.4e-9) == "3.40e-09"
    assert fmt(None) == "–" and fmt(float("nan")) == "–"
