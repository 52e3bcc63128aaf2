"""The JSON Schemas under schemas/ are the ones the loaders check with, and they hold for what
we ship: checked with the `jsonschema` library (an outside validator, Draft 2020-12)."""

from __future__ import annotations

import json
import tomllib
from pathlib import Path

import jsonschema
import pytest

from gateway.config_schema import config_json_schema
from gateway.profiles import builtin_profiles
from gateway.profiles.schema import profile_json_schema

ROOT = Path(__file__).resolve().parents[2]
SCHEMAS = ROOT / "schemas"
BUILTIN = ROOT / "gateway" / "profiles" / "builtin"
CONFIGS = ROOT / "gateway" / "configs"


def test_shipped_schemas_are_current() -> None:
    # regenerate with: leakfleet profile schema > schemas/profile.schema.json
    #                  leakfleet profile schema --config > schemas/gateway-config.schema.json
    assert json.loads((SCHEMAS / "profile.schema.json").read_text()) == profile_json_schema()
    assert json.loads((SCHEMAS / "gateway-config.schema.json").read_text()) == \
        config_json_schema()


@pytest.mark.parametrize("name", builtin_profiles())
def test_builtin_profiles_satisfy_the_schema(name: str) -> None:
    doc = tomllib.loads((BUILTIN / f"{name}.toml").read_text())
    jsonschema.Draft202012Validator(profile_json_schema()).validate(doc)


@pytest.mark.parametrize("name", ["demo", "annex"])
def test_shipped_configs_satisfy_the_schema(name: str) -> None:
    doc = tomllib.loads((CONFIGS / f"{name}.toml").read_text(), parse_float=float)
    # TOML dates are datetime.date objects; JSON Schema sees their text
    for std in doc.get("standards", []):
        for key, value in list(std.items()):
            if hasattr(value, "isoformat"):
                std[key] = value.isoformat()
    jsonschema.Draft202012Validator(config_json_schema()).validate(doc)


@pytest.mark.parametrize(("table", "key", "value"), [
    ("serial", "parity", "X"), ("serial", "baudrate", "fast"), ("dialect", "kind", "csv"),
    ("serial", "colour", "red"),
])
def test_the_schema_refuses_what_the_loader_refuses(table: str, key: str, value: object) -> None:
    from gateway.errors import ConfigError
    from gateway.profiles import parse_profile

    doc = tomllib.loads((BUILTIN / "lf-delim.toml").read_text())
    doc[table][key] = value
    with pytest.raises(jsonschema.ValidationError):
        jsonschema.Draft202012Validator(profile_json_schema()).validate(doc)
    with pytest.raises(ConfigError) as info:
        parse_profile(doc, "p.toml")
    assert f"{table}.{key}" in str(info.value)
