"""The plant's program sheet in the gateway config fills what a station does not send.

An lf-semi station sends no reject limit and no times; the config's ``[parameters]`` (plant
wide) and ``parameters`` (per station) give them, the record names each as supplied by the
config, and a value the station sends still wins.
"""

from __future__ import annotations

import textwrap
from datetime import UTC, datetime
from pathlib import Path

import pytest

from gateway.config import load_config
from gateway.errors import ConfigError
from gateway.profiles.decoders import serial_parser
from gateway.records import TestResult
from gateway.runtime import build_targets

CONFIG = """
site = "Test Works"
timezone = "Europe/Berlin"

[parameters."HX-210"]
reject_limit = "2 sccm"
lower_limit = "-1 sccm"
fill = "3 s"
stabilise = "8 s"
test = 10
part_family = "housings"

[parameters."*"]
test_pressure = "3.5 bar"

[[stations]]
id = "L9-S1"
line = "L9"
profile = "lf-semi"
endpoint = "tcp://127.0.0.1:9"
programs = { 2 = "HX-210" }
parameters = { "HX-210" = { reject_limit = "1.5 sccm" }, "*" = { test = "12 s" } }
"""

LINE = b"03.12.26;14:05:09;012345;A7-44512;2;;12,48;8,5E-01;OK"


def _parse(tmp_path: Path, text: str, line: bytes) -> TestResult:
    cfg = tmp_path / "gateway.toml"
    cfg.write_text(textwrap.dedent(text))
    target = build_targets(load_config(cfg), {})[0]
    assert target.profile.serial is not None
    parser = serial_parser(target.profile.serial, target.context)
    [out] = parser.parse([line], 1, datetime(2026, 12, 3, 13, 5, 10, tzinfo=UTC))
    assert isinstance(out, TestResult), out
    return out


def test_station_entry_over_plant_entry_over_defaults(tmp_path: Path) -> None:
    r = _parse(tmp_path, CONFIG, LINE)
    assert r.reject_limit_sccm == pytest.approx(1.5)  # the station's own entry wins
    assert r.lower_limit_sccm == pytest.approx(-1.0)  # the plant's entry for HX-210
    assert (r.fill_s, r.stabilise_s, r.test_s) == (3.0, 8.0, 10.0)  # plant's over station "*"
    # "3.5 bar" = 350 000 Pa (pint: Quantity(3.5, "bar").to("Pa"))
    assert r.test_pressure_pa == pytest.approx(350_000.0)
    supplied = dict(r.supplied)
    for name in ("reject_limit_sccm", "lower_limit_sccm", "fill_s", "stabilise_s", "test_s",
                 "test_pressure_pa"):
        assert supplied[name] == "config", name
    # what the station sent is not marked as supplied
    assert "leak_rate_sccm" not in supplied and "pressure_loss_pa" not in supplied


def test_a_value_the_station_sends_wins(tmp_path: Path) -> None:
    line = LINE.replace(b";;12,48", b";2.000,5;12,48")
    r = _parse(tmp_path, CONFIG, line)
    assert r.test_pressure_pa == pytest.approx(200_050.0)  # 2000.5 mbar = 200 050 Pa
    assert "test_pressure_pa" not in dict(r.supplied)


@pytest.mark.parametrize(
    ("table", "key"),
    [
        ('[parameters."HX-210"]\nreject_limit = "2 psi"', 'parameters."HX-210".reject_limit'),
        ('[parameters."HX-210"]\nrejectlimit = "2 sccm"', 'parameters."HX-210".rejectlimit'),
        ('[parameters."HX-210"]\nfill = "-3 s"', 'parameters."HX-210".fill'),
        ('[parameters."HX-210"]\nreject_limit = "1 sccm"\nlower_limit = "2 sccm"',
         'parameters."HX-210".lower_limit'),
        ('[parameters]\nHX = 3', 'parameters."HX"'),
    ],
)
def test_mistakes_name_the_key(tmp_path: Path, table: str, key: str) -> None:
    text = 'site = "T"\n' + table + '\n[[stations]]\nid = "A"\nline = "L"\nprofile = "lf-semi"\n' \
        'endpoint = "tcp://127.0.0.1:9"\n'
    cfg = tmp_path / "gateway.toml"
    cfg.write_text(text)
    with pytest.raises(ConfigError) as info:
        load_config(cfg)
    assert key in str(info.value) and "\n" not in str(info.value)
