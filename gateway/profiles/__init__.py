"""Station profiles: a station type is a TOML file, not code.

The seam between stations and the canonical records. A profile describes how a station talks
(a serial line, streaming or request/response, in one of four line dialects; or a Modbus register
map with a guarded result ring) and how each raw field becomes a canonical field with its unit.
Everything here is pure: drivers move the bytes and registers, ``SerialParser.parse`` and the
``ModbusSpec.decode_*`` methods turn them into ``TestResult`` / ``CalibrationEvent`` records or a
``Rejected`` with the reason, and never raise for bad input. ``load_profile`` validates a profile
once at start-up and raises ``ConfigError`` naming file, key and what was expected.
"""

from gateway.profiles.lines import SerialParser
from gateway.profiles.loader import builtin_dir, builtin_profiles, load_profile, parse_profile
from gateway.profiles.model import (
    AckSpec,
    BlockSpec,
    FieldSpec,
    ModbusSpec,
    Parsed,
    Profile,
    RegisterField,
    RequestSpec,
    RingSpec,
    SerialSpec,
    StationContext,
)

__all__ = [
    "AckSpec",
    "BlockSpec",
    "FieldSpec",
    "ModbusSpec",
    "Parsed",
    "Profile",
    "RegisterField",
    "RequestSpec",
    "RingSpec",
    "SerialParser",
    "SerialSpec",
    "StationContext",
    "builtin_dir",
    "builtin_profiles",
    "load_profile",
    "parse_profile",
]
