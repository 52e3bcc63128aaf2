"""Dashboard settings from the environment and the plant config: store, time zone, shifts.

``leakfleet dashboard`` passes its options to the Streamlit process as environment variables
(``LEAKFLEET_STORE``, ``LEAKFLEET_CONFIG``, ``LEAKFLEET_CLOCK``), so the app, the CLI and tests
all configure it the same way. The config is the gateway's TOML file (or ``demo``); the
dashboard reads only ``site``, ``timezone``, ``[shifts]`` (name = local start time) and, when
present, ``[[standards]]`` (the leak-standard register). Pure: no Streamlit, no store.
"""

from __future__ import annotations

import tomllib
from collections.abc import Mapping
from dataclasses import dataclass, field
from importlib import resources
from pathlib import Path
from typing import Any, Literal

from analytics import DEFAULT_SHIFTS, LeakStandard, ShiftCalendar
from gateway.config import parse_alarms
from gateway.errors import ConfigError

__all__ = ["DEFAULT_STORE_URL", "Settings", "load_settings", "shifts_from_starts"]

DEFAULT_STORE_URL = "sqlite:///./leakfleet.db"
Clock = Literal["wall", "data"]


@dataclass(frozen=True)
class Settings:
    """Everything a page needs besides the data."""

    store_url: str = DEFAULT_STORE_URL
    site: str = ""
    timezone: str = "UTC"
    shifts: tuple[tuple[str, str, str], ...] = DEFAULT_SHIFTS
    standards: tuple[LeakStandard, ...] = ()
    #: the config's [alarms] thresholds (``gateway.config.parse_alarms``), as hashable pairs
    alarms: tuple[tuple[str, float | int | None], ...] = ()
    clock: Clock = "wall"  # "data": "now" is the newest record when station clocks run ahead
    config_source: str | None = None
    notes: tuple[str, ...] = field(default_factory=tuple)

    @property
    def calendar(self) -> ShiftCalendar:
        return ShiftCalendar(self.timezone, self.shifts)


def shifts_from_starts(starts: Mapping[str, Any], file: str) -> tuple[tuple[str, str, str], ...]:
    """``{"early": "06:00", "late": "14:00", ...}`` (or spans) → (name, start, end), read by
    the same parser as ``leakfleet report`` (``gateway.reports.settings``)."""
    from gateway.reports.settings import calendar_from_table

    if not starts:
        return DEFAULT_SHIFTS
    try:
        return tuple(calendar_from_table("UTC", starts, file).shifts)
    except ValueError as exc:
        raise ConfigError(str(exc)) from None


def _standards(raw: Any, file: str) -> tuple[LeakStandard, ...]:
    """The [[standards]] register, read by the same parser as ``leakfleet report``."""
    if raw is None:
        return ()
    if not isinstance(raw, list):
        raise ConfigError(f"{file}: standards: expected [[standards]] tables")
    from gateway.reports.inputs import config_standard

    out = []
    for i, t in enumerate(raw):
        key = f"standards[{i}]"
        if not isinstance(t, dict):
            raise ConfigError(f"{file}: {key}: expected a table")
        for required in ("serial", "station", "nominal", "certificate_date"):
            if required not in t:
                raise ConfigError(f"{file}: {key}.{required}: a value (required)")
        try:
            out.append(config_standard(file, i, t))
        except ValueError as exc:
            raise ConfigError(str(exc)) from None
    return tuple(out)


def _read_config(ref: str) -> tuple[str, dict[str, Any]]:
    if ref == "demo":
        try:
            text = resources.files("gateway.configs").joinpath("demo.toml").read_text("utf-8")
        except (ModuleNotFoundError, FileNotFoundError):
            raise ConfigError("demo: the shipped demo config is not part of this build") from None
        return "demo", tomllib.loads(text)
    path = Path(ref)
    try:
        return str(path), tomllib.loads(path.read_text(encoding="utf-8"))
    except FileNotFoundError:
        raise ConfigError(f"{path}: no such config file") from None
    except OSError as exc:
        raise ConfigError(f"{path}: cannot read: {exc.strerror or exc}") from None
    except (UnicodeDecodeError, tomllib.TOMLDecodeError) as exc:
        raise ConfigError(f"{path}: not valid TOML: {exc}") from None


def load_settings(env: Mapping[str, str]) -> Settings:
    """Settings from ``LEAKFLEET_*`` variables; ConfigError (one line) on any mistake."""
    clock = env.get("LEAKFLEET_CLOCK", "wall").strip() or "wall"
    if clock not in ("wall", "data"):
        raise ConfigError(f"LEAKFLEET_CLOCK: expected 'wall' or 'data', got {clock!r}")
    config_ref = env.get("LEAKFLEET_CONFIG", "").strip()
    doc: dict[str, Any] = {}
    source = None
    if config_ref:
        source, doc = _read_config(config_ref)
    file = source or "config"
    store = env.get("LEAKFLEET_STORE", "").strip() or str(doc.get("store") or DEFAULT_STORE_URL)
    timezone = str(doc.get("timezone", "UTC"))
    shifts_raw = doc.get("shifts", {})
    if not isinstance(shifts_raw, dict):
        raise ConfigError(f'{file}: shifts: expected a table of name = "HH:MM"')
    shifts = shifts_from_starts(shifts_raw, file) if shifts_raw else DEFAULT_SHIFTS
    try:
        ShiftCalendar(timezone, shifts)
    except ValueError as exc:
        raise ConfigError(f"{file}: timezone/shifts: {exc}") from None
    return Settings(
        store_url=store,
        site=str(doc.get("site", "")),
        timezone=timezone,
        shifts=shifts,
        standards=_standards(doc.get("standards"), file),
        alarms=tuple(sorted(parse_alarms(doc.get("alarms", {}), file).items())),
        clock=clock,  # type: ignore[arg-type]
        config_source=source,
    )
