"""Load and validate TOML profiles; every mistake is a ConfigError naming file, key and expectation.

Validation happens once, here, so a station type that loads is one the drivers can trust: no
unknown keys, every required canonical field mapped, units known, patterns compiled, register
blocks that fit a single Modbus read and do not overlap.
"""

from __future__ import annotations

import re
import tomllib
from collections.abc import Sequence
from importlib import resources
from pathlib import Path
from typing import Any

from gateway.errors import ConfigError
from gateway.profiles.model import (
    Profile,
)
from gateway.profiles.schema import check_document

__all__ = ["builtin_dir", "builtin_profiles", "load_profile", "parse_profile"]

from gateway.profiles.load_fields import _Reader
from gateway.profiles.load_modbus import _modbus
from gateway.profiles.load_serial import _serial

_NAME = re.compile(r"^[a-z0-9][a-z0-9._-]*$")


def builtin_dir() -> Path:
    return Path(str(resources.files("gateway.profiles") / "builtin"))


def builtin_profiles() -> list[str]:
    """Names of the profiles shipped in the package."""
    return sorted(p.stem for p in builtin_dir().glob("*.toml"))


def parse_profile(doc: dict[str, Any], file: str) -> Profile:
    """Validate a parsed TOML document and build the Profile (``file`` names it in errors).

    First the document's shape (``schema.ProfileDocument``: types, choices, ranges), then what
    depends on several keys (units, layouts, line kinds) here."""
    check_document(doc, file)
    r = _Reader(file)
    meta = r.sub(doc, "profile", "")
    r.table(meta, "profile", ("name", "version", "description", "transport", "leak_reference_c"))
    name = r.string(meta, "name", "profile")
    if not _NAME.match(name):
        r.fail("profile.name", "lower-case letters, digits, '.', '_' or '-'", name)
    version = r.string(meta, "version", "profile")
    description = r.string(meta, "description", "profile", "", nonempty=False)
    transport = r.string(meta, "transport", "profile", choices=("serial", "modbus"))
    ref_c = r.number(meta, "leak_reference_c", "profile", 0.0)
    if ref_c not in (0.0, 20.0):
        r.fail("profile.leak_reference_c", "0 or 20 (°C base of sccm)", meta["leak_reference_c"])
    label = f"{name}@{version}"
    allowed = (("profile", "serial", "dialect", "result", "calibration", "trace")
               if transport == "serial"
               else ("profile", "modbus"))
    r.table(doc, "", allowed)
    serial = _serial(r, doc, label, ref_c) if transport == "serial" else None
    modbus = _modbus(r, doc, label, ref_c) if transport == "modbus" else None
    return Profile(name=name, version=version, label=label, description=description,
                   transport=transport, serial=serial, modbus=modbus, source=file)


def _read(path: Path) -> Profile:
    try:
        text = path.read_bytes().decode("utf-8")
    except OSError as exc:
        raise ConfigError(f"{path}: cannot read profile: {exc.strerror or exc}") from None
    except UnicodeDecodeError:
        raise ConfigError(f"{path}: expected a UTF-8 TOML file") from None
    try:
        doc = tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        raise ConfigError(f"{path}: not valid TOML: {exc}") from None
    return parse_profile(doc, str(path))


def load_profile(ref: str | Path, search_dirs: Sequence[Path] = ()) -> Profile:
    """Load a profile by name (searched in ``search_dirs``, then the built-ins) or by path."""
    text = str(ref)
    if isinstance(ref, Path) or text.endswith(".toml") or "/" in text or "\\" in text:
        path = Path(ref)
        if not path.is_file():
            raise ConfigError(f"{path}: profile file not found")
        return _read(path)
    for directory in [*map(Path, search_dirs), builtin_dir()]:
        candidate = directory / f"{text}.toml"
        if candidate.is_file():
            profile = _read(candidate)
            if profile.name != text:
                raise ConfigError(f"{candidate}: profile.name: expected {text!r} (the file "
                                  f"name), got {profile.name!r}; set name = {text!r} in the "
                                  f"file (a copy of a built-in keeps its old name)")
            return profile
    places = ", ".join(str(d) for d in search_dirs) or "no profile directories"
    raise ConfigError(f"profile {text!r}: expected a profile file {text}.toml in {places} or a "
                      f"built-in profile ({', '.join(builtin_profiles())})")
