"""Report settings from options and the gateway config: store URL, time zone, shifts, standards."""

from __future__ import annotations

import argparse
import re
from collections.abc import Mapping
from datetime import time
from typing import Any

from gateway.reports.common import DEFAULT_SHIFTS, DEFAULT_STORE
from gateway.reports.inputs import config_standard, read_standards


def plant_of(args: argparse.Namespace) -> Any | None:
    """The gateway config named by --config (loaded once per command), or None."""
    ref = getattr(args, "config", None)
    if not ref:
        return None
    cached = getattr(args, "_plant_config", None)
    if cached is None:
        from gateway.config import load_config

        cached = load_config(ref)
        args._plant_config = cached
    return cached


def store_url(args: argparse.Namespace) -> str:
    """--store, else the --config journal, else the default journal."""
    if getattr(args, "store", None):
        return str(args.store)
    plant = plant_of(args)
    return str(plant.store) if plant is not None else DEFAULT_STORE


def timezone_of(args: argparse.Namespace) -> str:
    if getattr(args, "timezone", None):
        return str(args.timezone)
    plant = plant_of(args)
    return str(plant.timezone) if plant is not None else "UTC"


def calendar_of(args: argparse.Namespace) -> Any:
    """The shift calendar: --shifts, else the config's [shifts], else the default three."""
    from analytics import ShiftCalendar

    timezone = timezone_of(args)
    if getattr(args, "shifts", None):
        return ShiftCalendar(timezone, parse_shifts(args.shifts))
    plant = plant_of(args)
    if plant is None or not plant.shifts:
        return ShiftCalendar(timezone, parse_shifts(DEFAULT_SHIFTS))
    return calendar_from_table(timezone, plant.shifts, plant.source)


def calendar_from_table(timezone: str, table: Mapping[str, Any], source: str) -> Any:
    """A plant config's ``[shifts]`` table as a shift calendar, read the same way by
    ``leakfleet report`` and the dashboard: every shift a local start time (``"06:00"`` or a
    TOML time; each ends where the next begins, so at least two are needed) or every shift
    a span (``"06:00-14:00"``). ValueError names the file and the key."""
    from analytics import ShiftCalendar

    values: dict[str, str] = {}
    for name, value in table.items():
        text = value.strftime("%H:%M") if isinstance(value, time) else value
        if not isinstance(text, str) or not re.fullmatch(
            r"\s*\d{1,2}:\d{2}\s*(-\s*\d{1,2}:\d{2}\s*)?", text
        ):
            raise ValueError(f"{source}: shifts.{name}: expected a local time HH:MM, got "
                             f"{value!r}")
        values[str(name)] = text
    spans = [("-" in v) for v in values.values()]
    try:
        if spans and all(spans):
            return ShiftCalendar(
                timezone, parse_shifts(",".join(f"{n}={v}" for n, v in values.items()))
            )
        if any(spans):
            raise ValueError("give every shift as a start time, or every shift as a span")
        if len(values) < 2:
            raise ValueError("expected at least two shift start times (each shift ends where "
                             "the next begins), or spans HH:MM-HH:MM")
        starts = {n: v.strip().zfill(5) for n, v in values.items()}
        return ShiftCalendar.from_starts(timezone, starts)
    except ValueError as exc:
        raise ValueError(f"{source}: shifts: {exc}") from None


def parse_shifts(text: str) -> list[tuple[str, str, str]]:
    shifts = []
    for item in text.split(","):
        m = re.fullmatch(r"\s*([^=\s]+)\s*=\s*(\d{1,2}:\d{2})\s*-\s*(\d{1,2}:\d{2})\s*", item)
        if not m:
            raise ValueError(f"--shifts: expected NAME=HH:MM-HH:MM, got {item.strip()!r}")
        start, end = (t if len(t) == 5 else "0" + t for t in (m.group(2), m.group(3)))
        shifts.append((m.group(1), start, end))
    return shifts


def standards_register(args: argparse.Namespace) -> list[Any]:
    """The leak-standard register: --standards FILE.csv, else the config's [[standards]]."""
    if getattr(args, "standards", None):
        return read_standards(args.standards)
    plant = plant_of(args)
    if plant is None:
        return []
    return [config_standard(plant.source, i, t) for i, t in enumerate(plant.standards)]
