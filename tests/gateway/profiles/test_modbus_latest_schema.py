"""``[modbus.latest]``: the schema's one-line errors and the one-slot ring it implies."""

from __future__ import annotations

import tomllib
from pathlib import Path

import pytest

from gateway.errors import ConfigError
from gateway.profiles.loader import parse_profile

BUILTIN = Path(__file__).parents[3] / "gateway" / "profiles" / "builtin" / "lf-mblast.toml"


def doc() -> dict:  # type: ignore[type-arg]
    return tomllib.loads(BUILTIN.read_text())


def test_latest_block_is_a_one_slot_ring_with_the_cycle_as_guard() -> None:
    spec = parse_profile(doc(), "p.toml").modbus
    assert spec is not None and spec.latest is not None
    ring = spec.result
    assert (ring.depth, ring.base, ring.length, ring.head_guard) == (1, 0, 16, 0)


def test_flag_detection_without_a_flag_is_one_line() -> None:
    d = doc()
    del d["modbus"]["latest"]["flag"]
    with pytest.raises(ConfigError) as info:
        parse_profile(d, "p.toml")
    assert str(info.value).startswith("p.toml: modbus.latest: expected")
    assert "\n" not in str(info.value)


def test_ring_keys_beside_latest_are_refused() -> None:
    d = doc()
    d["modbus"]["result"]["depth"] = 4
    with pytest.raises(ConfigError, match=r"modbus\.result\.depth: expected no ring keys"):
        parse_profile(d, "p.toml")


def test_a_coil_acknowledge_takes_only_0_1_or_clear() -> None:
    d = doc()
    d["modbus"]["latest"]["ack"] = [{"function": 5, "address": 0, "value": 7}]
    with pytest.raises(ConfigError, match=r"modbus\.latest\.ack"):
        parse_profile(d, "p.toml")
