"""Scenario files: the plant to simulate, loaded once into frozen, validated objects.

A scenario is TOML. Physical quantities are strings with their unit ("350 kPa", "250 cc",
"10 s", "2 sccm"), parsed with ``gateway.units``. A scenario may ``extends = "demo"`` (a built-in
name or a path relative to the file) and override top-level keys; tables merge key by key.
Every mistake raises ``ConfigError`` naming the file, the key and what was expected.
"""

from __future__ import annotations

import dataclasses
import math
import tomllib
from collections.abc import Mapping
from dataclasses import dataclass, field
from datetime import datetime
from importlib import resources
from pathlib import Path
from typing import Any, Literal
from zoneinfo import ZoneInfo, ZoneInfoNotFoundError

from gateway.errors import ConfigError, UnitError
from gateway.units import Kind, parse_quantity

__all__ = [
    "STATION_TYPES",
    "STREAM_TYPES",
    "Faults",
    "LeakStandard",
    "Population",
    "Program",
    "Scenario",
    "Station",
    "builtin_scenarios",
    "load_scenario",
    "loads_scenario",
]

StationType = Literal["lf-delim", "lf-kv", "lf-mbtcp", "lf-mbrtu", "lf-semi", "lf-noclock",
                      "lf-mbinput", "lf-mblast", "lf-mbnoclk", "lf-ticket"]
STATION_TYPES: tuple[str, ...] = ("lf-delim", "lf-kv", "lf-mbtcp", "lf-mbrtu", "lf-semi",
                                  "lf-noclock", "lf-mbinput", "lf-mblast", "lf-mbnoclk",
                                  "lf-ticket")
#: streaming line stations behind a serial device server: a line goes to whoever listens
STREAM_TYPES = ("lf-delim", "lf-semi", "lf-noclock")
TCP_TYPES = (*STREAM_TYPES, "lf-mbtcp", "lf-mbinput", "lf-mblast", "lf-mbnoclk", "lf-ticket")
LINE_TYPES = (*STREAM_TYPES, "lf-kv", "lf-ticket")
#: types whose stations share one line, each answering to its own address
BUS_TYPES = ("lf-ticket",)
#: types that can send each test's pressure curve (key ``trace_interval``)
TRACE_TYPES = ("lf-delim", "lf-mbtcp")
MODBUS_TYPES = ("lf-mbtcp", "lf-mbrtu", "lf-mbinput", "lf-mblast", "lf-mbnoclk")
#: Modbus types whose records sit in a guarded ring (a torn write is detectable there)
RING_TYPES = ("lf-mbtcp", "lf-mbrtu", "lf-mbinput")
# longest part id each type can carry (register string blocks are fixed)
PART_ID_MAX = {"lf-delim": 32, "lf-kv": 32, "lf-mbtcp": 16, "lf-mbrtu": 8, "lf-semi": 32,
               "lf-noclock": 64, "lf-mbinput": 8, "lf-mblast": 64, "lf-mbnoclk": 64,
               "lf-ticket": 32}
DEFAULT_DEVICE_ID = {"lf-mbtcp": 1, "lf-mbrtu": 7}


@dataclass(frozen=True, slots=True)
class LeakStandard:
    """A calibrated leak the station opens on the master part: flow rated at a gauge pressure."""

    serial: str
    flow_sccm: float
    reference_pressure_pa: float


@dataclass(frozen=True, slots=True)
class Population:
    """Where parts' true leaks come from (sccm at the program's test pressure)."""

    good_median_sccm: float = 0.05
    good_sigma: float = 0.9  # lognormal shape: skewed, mostly tight parts, a long tail
    reject_fraction: float = 0.02
    reject_range: tuple[float, float] = (1.2, 8.0)  # multiples of the reject limit, log-uniform
    gross_fraction: float = 0.004
    gross_sccm: tuple[float, float] = (300.0, 3000.0)
    abort_fraction: float = 0.003
    retest_fraction: float = 0.5  # of rejected parts, tested again (same part id)
    part_offset_mean_k: float = 0.3  # parts arrive warmer (+) or cooler (−) than the fixture
    part_offset_sd_k: float = 0.8


@dataclass(frozen=True, slots=True)
class Program:
    """A test program: one part type on a station."""

    name: str
    volume_m3: float
    test_pressure_pa: float
    fill_s: float
    stabilise_s: float
    test_s: float
    reject_limit_sccm: float
    standard: LeakStandard
    lower_limit_sccm: float | None = None
    calibration_interval: int = 50
    ratio_min: float = 2.0
    part_id: str = ""  # format with {n}, e.g. "HX210-{n:06d}"; empty = the station has no scanner
    population: str = "default"
    fill_heating_k: float = 0.8
    thermal_tau_s: float = 2.5
    part_tau_s: float = 600.0
    fill_capacity_sccm: float = 4000.0
    fill_tolerance: float = 0.05  # gross when fill ends more than this fraction short
    # relative part-to-part scatter (SD) of a part's internal volume: castings and mouldings
    # differ; the station's calibration assumes the master part's volume
    volume_scatter: float = 0.0


@dataclass(frozen=True, slots=True)
class Faults:
    """Faults one station injects (only when the scenario or ``--faults`` enables them)."""

    link_drop_every_s: float | None = None  # simulated time between drops
    link_drop_down_s: float = 30.0  # simulated time the link stays down
    garbage: float = 0.0  # probability per emitted record of a garbage line before it
    truncated: float = 0.0  # probability that a record's line is cut short
    duplicate: float = 0.0  # probability that a record's line is sent twice
    clock_offset_s: float = 0.0  # station clock minus true time
    slow_probability: float = 0.0  # per request, answer late
    slow_delay_s: float = 3.0  # wall-clock delay of a slow answer
    exception_probability: float = 0.0  # per Modbus request, an exception response
    exception_code: int = 6  # 04 device failure, 06 device busy
    torn_probability: float = 0.0  # per result/calibration, counter first then the block in halves
    torn_gap_s: float = 0.3  # wall-clock gap between the halves
    reset_after: int = 0  # results after which the station is power-cycled once (0 = never):
    #                       its counter starts again from 1 and what it kept in RAM is gone

    @property
    def any(self) -> bool:
        return self != Faults()


@dataclass(frozen=True, slots=True)
class Station:
    """One simulated station: its type, endpoint, programs and wear."""

    name: str
    line: str
    type: StationType
    programs: Mapping[int, str]  # program number → program name
    port: int | None = None  # TCP types (127.0.0.1); 0 = any free port
    tty: str | None = None  # pty types: symlink name in the run dir
    device_id: int = 1
    serial: str = ""
    batch_cycles: int = 60  # cycles before a changeover to the next program
    seal_leak_sccm: float = 0.02  # fixture seal leak of a new seal
    seal_wear_sccm: float = 0.0005  # added per cycle as the seal wears
    noise_pa: float = 0.3
    resolution_pa: float = 0.1
    load_s: tuple[float, float] = (4.0, 12.0)  # operator handling between cycles
    pause_probability: float = 0.01
    pause_s: tuple[float, float] = (60.0, 600.0)
    min_cycle_s: float = 20.0  # shortest cycle, result to result (clamp, vent, unload)
    faults: Faults = field(default_factory=Faults)
    first_cycle: int = 1  # the cycle number of the first result (near a counter's wrap to try it)
    bus: str | None = None  # addressed types: the shared line's name (stations on it share a port)
    address: int = 1  # addressed types: the station's address on its line
    trace_interval_s: float = 0.0  # > 0: the station sends each test's pressure curve


@dataclass(frozen=True, slots=True)
class Scenario:
    """A whole plant: site, lines, programs, stations, seed."""

    source: str
    site: str
    timezone: str
    seed: int
    lines: Mapping[str, str]  # line id → name
    programs: Mapping[str, Program]
    populations: Mapping[str, Population]
    stations: tuple[Station, ...]
    run_dir: Path = Path("run/sim")
    start: datetime | None = None  # simulated start (aware); None = now
    ambient_mean_c: float = 21.0
    ambient_swing_k: float = 3.0  # peak-to-mean of the daily cycle
    ambient_peak_hour: float = 15.0  # local hour of the warmest ambient
    faults_enabled: bool = False

    def station(self, name: str) -> Station:
        for station in self.stations:
            if station.name == name:
                return station
        raise KeyError(name)

    def with_free_ports(self, run_dir: Path | None = None) -> Scenario:
        """A copy with every TCP port 0 (the OS picks) and optionally another run dir (tests)."""
        stations = tuple(
            dataclasses.replace(s, port=0) if s.port is not None else s for s in self.stations
        )
        return dataclasses.replace(
            self, stations=stations, run_dir=run_dir if run_dir is not None else self.run_dir
        )

    def with_faults(self, enabled: bool = True) -> Scenario:
        return dataclasses.replace(self, faults_enabled=enabled)


def builtin_scenarios() -> list[str]:
    folder = resources.files("sim") / "scenarios"
    return sorted(p.name[:-5] for p in folder.iterdir() if p.name.endswith(".toml"))


def _builtin_path(name: str) -> Path | None:
    candidate = resources.files("sim") / "scenarios" / f"{name}.toml"
    return Path(str(candidate)) if candidate.is_file() else None


def load_scenario(ref: str | Path) -> Scenario:
    """A built-in scenario by name (``demo``) or a scenario file by path."""
    path = (
        _builtin_path(str(ref))
        if isinstance(ref, str) and "/" not in ref and not ref.endswith(".toml")
        else None
    )
    if path is None:
        path = Path(ref)
        if not path.is_file():
            known = ", ".join(builtin_scenarios())
            raise ConfigError(f"{ref}: no such scenario file (built-in scenarios: {known})")
    return _build(_read_with_extends(path, set()), str(path))


def loads_scenario(text: str, source: str = "<string>", base_dir: Path | None = None) -> Scenario:
    """A scenario from TOML text (tests); ``extends`` resolves against ``base_dir``."""
    try:
        data = tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        raise ConfigError(f"{source}: not valid TOML: {exc}") from None
    data = _resolve_extends(data, source, base_dir or Path.cwd(), set())
    return _build(data, source)


def _read_with_extends(path: Path, seen: set[Path]) -> dict[str, Any]:
    resolved = path.resolve()
    if resolved in seen:
        raise ConfigError(f"{path}: 'extends' loops back to itself")
    seen.add(resolved)
    try:
        data = tomllib.loads(path.read_text(encoding="utf-8"))
    except tomllib.TOMLDecodeError as exc:
        raise ConfigError(f"{path}: not valid TOML: {exc}") from None
    except OSError as exc:
        raise ConfigError(f"{path}: cannot read: {exc.strerror}") from None
    return _resolve_extends(data, str(path), path.parent, seen)


def _resolve_extends(
    data: dict[str, Any], source: str, base_dir: Path, seen: set[Path]
) -> dict[str, Any]:
    parent = data.pop("extends", None)
    if parent is None:
        return data
    if not isinstance(parent, str):
        raise ConfigError(f"{source}: key 'extends': expected a scenario name or path")
    path = _builtin_path(parent) if not parent.endswith(".toml") else None
    if path is None:
        path = base_dir / parent
        if not path.is_file():
            raise ConfigError(f"{source}: key 'extends': no scenario {parent!r}")
    return _merge(_read_with_extends(path, seen), data)


def _merge(base: dict[str, Any], over: dict[str, Any]) -> dict[str, Any]:
    out = dict(base)
    for key, value in over.items():
        if isinstance(value, dict) and isinstance(out.get(key), dict):
            out[key] = _merge(out[key], value)
        else:
            out[key] = value
    return out


class _Reader:
    """Pulls typed values out of one TOML table, remembering the key path for errors."""

    def __init__(self, source: str, table: Mapping[str, Any], where: str) -> None:
        if not isinstance(table, Mapping):
            raise ConfigError(f"{source}: key '{where}': expected a table")
        self.source = source
        self.table = dict(table)
        self.where = where
        self.used: set[str] = set()

    def key(self, name: str) -> str:
        return f"{self.where}.{name}" if self.where else name

    def fail(self, name: str, expected: str) -> ConfigError:
        got = self.table.get(name)
        return ConfigError(
            f"{self.source}: key '{self.key(name)}': expected {expected}, got {got!r}"
        )

    def has(self, name: str) -> bool:
        return name in self.table

    def raw(self, name: str, default: Any = None) -> Any:
        self.used.add(name)
        return self.table.get(name, default)

    def text(self, name: str, default: str | None = None) -> str:
        value = self.raw(name, default)
        if not isinstance(value, str) or (default is None and not value.strip()):
            raise self.fail(name, "a text")
        return value

    def integer(self, name: str, default: int | None = None, minimum: int | None = None) -> int:
        value = self.raw(name, default)
        if (
            isinstance(value, bool)
            or not isinstance(value, int)
            or (minimum is not None and value < minimum)
        ):
            raise self.fail(
                name, f"an integer >= {minimum}" if minimum is not None else "an integer"
            )
        return value

    def number(
        self, name: str, default: float | None = None, minimum: float | None = None
    ) -> float:
        value = self.raw(name, default)
        if (
            isinstance(value, bool)
            or not isinstance(value, (int, float))
            or not math.isfinite(value)
        ):
            raise self.fail(name, "a number")
        if minimum is not None and value < minimum:
            raise self.fail(name, f"a number >= {minimum}")
        return float(value)

    def fraction(self, name: str, default: float = 0.0) -> float:
        value = self.number(name, default)
        if not 0.0 <= value <= 1.0:
            raise self.fail(name, "a probability between 0 and 1")
        return value

    def quantity(
        self, name: str, kind: Kind, default: str | None = None, positive: bool = False
    ) -> float:
        value = self.raw(name, default)
        if not isinstance(value, str):
            raise self.fail(name, f"a {kind} with its unit as text, e.g. '{_EXAMPLE[kind]}'")
        try:
            canonical = parse_quantity(value, kind).canonical
        except UnitError as exc:
            raise ConfigError(f"{self.source}: key '{self.key(name)}': {exc}") from None
        if positive and canonical <= 0:
            raise self.fail(name, f"a positive {kind}")
        return canonical

    def pair(
        self, name: str, default: tuple[float, float], kind: Kind | None = None
    ) -> tuple[float, float]:
        value = self.raw(name, None)
        if value is None:
            return default
        if not isinstance(value, list) or len(value) != 2:
            raise self.fail(name, "a list of two values [low, high]")
        items: list[float] = []
        for item in value:
            if kind is not None and isinstance(item, str):
                try:
                    items.append(parse_quantity(item, kind).canonical)
                except UnitError as exc:
                    raise ConfigError(f"{self.source}: key '{self.key(name)}': {exc}") from None
            elif isinstance(item, (int, float)) and not isinstance(item, bool):
                items.append(float(item))
            else:
                raise self.fail(name, "a list of two values [low, high]")
        if not 0 <= items[0] <= items[1]:
            raise self.fail(name, "[low, high] with 0 <= low <= high")
        return items[0], items[1]

    def done(self) -> None:
        unknown = sorted(set(self.table) - self.used)
        if unknown:
            raise ConfigError(f"{self.source}: key '{self.key(unknown[0])}': unknown key")


_EXAMPLE: dict[str, str] = {
    "pressure": "350 kPa",
    "leak": "2 sccm",
    "volume": "250 cc",
    "time": "10 s",
    "temperature": "21 C",
}


def _build(data: dict[str, Any], source: str) -> Scenario:
    top = _Reader(source, data, "")
    site = top.text("site")
    tz_name = top.text("timezone", "UTC")
    try:
        tz = ZoneInfo(tz_name)
    except (ZoneInfoNotFoundError, ValueError):
        raise top.fail("timezone", "an IANA time zone such as 'Europe/Berlin'") from None
    seed = top.integer("seed", 1, minimum=0)
    run_dir = Path(top.text("run_dir", "run/sim"))
    start_raw = top.raw("start")
    start: datetime | None = None
    if start_raw is not None:
        if isinstance(start_raw, datetime):
            start = start_raw
        elif isinstance(start_raw, str):
            try:
                start = datetime.fromisoformat(start_raw)
            except ValueError:
                raise top.fail("start", "an ISO date-time such as '2026-12-02T06:00:00'") from None
        else:
            raise top.fail("start", "an ISO date-time such as '2026-12-02T06:00:00'")
        if start.tzinfo is None:
            start = start.replace(tzinfo=tz)

    lines_raw = top.raw("lines", {})
    lines_reader = _Reader(source, lines_raw, "lines")
    lines: dict[str, str] = {}
    for line_id in lines_reader.table:
        entry = _Reader(source, lines_reader.raw(line_id), f"lines.{line_id}")
        lines[line_id] = entry.text("name")
        entry.done()
    if not lines:
        raise ConfigError(
            f"{source}: key 'lines': expected at least one [lines.<id>] table with a name"
        )

    populations: dict[str, Population] = {"default": Population()}
    pops = _Reader(source, top.raw("populations", {}), "populations")
    for name in pops.table:
        populations[name] = _population(_Reader(source, pops.raw(name), f"populations.{name}"))

    programs: dict[str, Program] = {}
    progs = _Reader(source, top.raw("programs", {}), "programs")
    for name in progs.table:
        programs[name] = _program(
            name, _Reader(source, progs.raw(name), f"programs.{name}"), populations
        )
    if not programs:
        raise ConfigError(f"{source}: key 'programs': expected at least one program table")

    faults_enabled = bool(top.raw("faults_enabled", False))
    faults_tables = _Reader(source, top.raw("faults", {}), "faults")

    stations_raw = top.raw("stations", [])
    if not isinstance(stations_raw, list) or not stations_raw:
        raise ConfigError(f"{source}: key 'stations': expected an array of [[stations]] tables")
    stations: list[Station] = []
    seen_endpoints: set[object] = set()
    buses: dict[str, Station] = {}  # the first station of each shared line
    for index, raw in enumerate(stations_raw):
        reader = _Reader(source, raw, f"stations[{index}]")
        station = _station(reader, lines, programs)
        if station.name in {s.name for s in stations}:
            raise reader.fail("name", "a station name used only once")
        endpoint = ("port", station.port) if station.port else ("tty", station.tty)
        if station.bus is not None and station.bus in buses:
            first = buses[station.bus]
            if station.port != first.port or station.type != first.type:
                raise reader.fail("port", f"port {first.port} and type {first.type}, as "
                                  f"{first.name} on line {station.bus!r}")
            if any(s.bus == station.bus and s.address == station.address for s in stations):
                raise reader.fail("address", f"an address of its own on line {station.bus!r}")
            stations.append(_with_faults(source, faults_tables, station))
            continue
        if station.bus is not None:
            buses[station.bus] = station
        if station.port != 0 and endpoint in seen_endpoints:
            which = reader.key("port" if station.port else "tty")
            raise ConfigError(f"{source}: key '{which}': used by two stations")
        seen_endpoints.add(endpoint)
        stations.append(_with_faults(source, faults_tables, station))
    for name in faults_tables.table:
        if name not in {s.name for s in stations}:
            raise ConfigError(f"{source}: key 'faults.{name}': no station of that name")

    ambient = _Reader(source, top.raw("ambient", {}), "ambient")
    ambient_mean = ambient.number("mean_c", 21.0)
    ambient_swing = ambient.number("swing_k", 3.0, minimum=0.0)
    ambient_peak = ambient.number("peak_hour", 15.0, minimum=0.0)
    ambient.done()
    top.done()
    return Scenario(
        source=source,
        site=site,
        timezone=tz_name,
        seed=seed,
        lines=lines,
        programs=programs,
        populations=populations,
        stations=tuple(stations),
        run_dir=run_dir,
        start=start,
        ambient_mean_c=ambient_mean,
        ambient_swing_k=ambient_swing,
        ambient_peak_hour=ambient_peak,
        faults_enabled=faults_enabled,
    )


def _population(r: _Reader) -> Population:
    d = Population()
    pop = Population(
        good_median_sccm=r.quantity(
            "good_median", "leak", f"{d.good_median_sccm} sccm", positive=True
        ),
        good_sigma=r.number("good_sigma", d.good_sigma, minimum=0.0),
        reject_fraction=r.fraction("reject_fraction", d.reject_fraction),
        reject_range=r.pair("reject_range", d.reject_range),
        gross_fraction=r.fraction("gross_fraction", d.gross_fraction),
        gross_sccm=r.pair("gross_range", d.gross_sccm, "leak"),
        abort_fraction=r.fraction("abort_fraction", d.abort_fraction),
        retest_fraction=r.fraction("retest_fraction", d.retest_fraction),
        part_offset_mean_k=r.number("part_offset_mean_k", d.part_offset_mean_k),
        part_offset_sd_k=r.number("part_offset_sd_k", d.part_offset_sd_k, minimum=0.0),
    )
    if pop.reject_fraction + pop.gross_fraction + pop.abort_fraction > 1.0:
        raise r.fail("reject_fraction", "reject + gross + abort fractions adding up to at most 1")
    r.done()
    return pop


def _program(name: str, r: _Reader, populations: Mapping[str, Population]) -> Program:
    test_pressure = r.quantity("test_pressure", "pressure", positive=True)
    std = _Reader(r.source, r.raw("standard"), r.key("standard"))
    standard = LeakStandard(
        serial=std.text("serial"),
        flow_sccm=std.quantity("flow", "leak", positive=True),
        reference_pressure_pa=std.quantity("reference_pressure", "pressure", positive=True),
    )
    std.done()
    lower = r.quantity("lower_limit", "leak") if r.has("lower_limit") else None
    d = Program(name, 1, 1, 1, 1, 1, 1, standard)
    program = Program(
        name=name,
        volume_m3=r.quantity("volume", "volume", positive=True),
        test_pressure_pa=test_pressure,
        fill_s=r.quantity("fill", "time", positive=True),
        stabilise_s=r.quantity("stabilise", "time", positive=True),
        test_s=r.quantity("test", "time", positive=True),
        reject_limit_sccm=r.quantity("reject_limit", "leak", positive=True),
        standard=standard,
        lower_limit_sccm=lower,
        calibration_interval=r.integer("calibration_interval", d.calibration_interval, minimum=1),
        ratio_min=r.number("ratio_min", d.ratio_min, minimum=1.0),
        part_id=r.text("part_id", ""),
        population=r.text("population", "default"),
        fill_heating_k=r.number("fill_heating_k", d.fill_heating_k),
        thermal_tau_s=r.quantity("thermal_tau", "time", f"{d.thermal_tau_s} s", positive=True),
        part_tau_s=r.quantity("part_tau", "time", f"{d.part_tau_s} s", positive=True),
        fill_capacity_sccm=r.quantity(
            "fill_capacity", "leak", f"{d.fill_capacity_sccm} sccm", positive=True
        ),
        fill_tolerance=r.fraction("fill_tolerance", d.fill_tolerance),
        volume_scatter=r.number("volume_scatter", 0.0, minimum=0.0),
    )
    if lower is not None and lower >= program.reject_limit_sccm:
        raise r.fail("lower_limit", "a leak rate below the reject limit (usually negative)")
    if program.population not in populations:
        raise r.fail(
            "population", f"one of the [populations] tables ({', '.join(sorted(populations))})"
        )
    if program.part_id:
        try:
            program.part_id.format(n=1, s=1)
        except (KeyError, IndexError, ValueError):
            raise r.fail(
                "part_id", "a pattern with {n} (part number) and optionally {s} (station number)"
            ) from None
    r.done()
    return program


def _with_faults(source: str, tables: _Reader, station: Station) -> Station:
    if not tables.has(station.name):
        return station
    faults = _faults(_Reader(source, tables.raw(station.name), f"faults.{station.name}"),
                     station.type)
    return dataclasses.replace(station, faults=faults)


def _station(r: _Reader, lines: Mapping[str, str], programs: Mapping[str, Program]) -> Station:
    name = r.text("name")
    line = r.text("line")
    if line not in lines:
        raise r.fail("line", f"one of the [lines] ({', '.join(lines)})")
    kind = r.text("type")
    if kind not in STATION_TYPES:
        raise r.fail("type", f"one of {', '.join(STATION_TYPES)}")
    raw_programs = r.raw("programs")
    numbered: dict[int, str] = {}
    if isinstance(raw_programs, list) and raw_programs:
        numbered = {i + 1: p for i, p in enumerate(raw_programs)}
    elif isinstance(raw_programs, dict) and raw_programs:
        for key, value in raw_programs.items():
            if not str(key).isdigit() or not 1 <= int(key) <= 65535:
                raise r.fail(
                    "programs", 'program numbers 1..65535 mapped to names, e.g. {1 = "HX-210"}'
                )
            numbered[int(key)] = value
    else:
        raise r.fail("programs", "a list of program names or a table {number = name}")
    for value in numbered.values():
        if value not in programs:
            raise r.fail("programs", f"names of [programs] tables ({', '.join(programs)})")
    port: int | None = None
    tty: str | None = None
    if kind in TCP_TYPES:
        port = r.integer("port", minimum=0)
        if port > 65535:
            raise r.fail("port", "a TCP port 0..65535")
    else:
        tty = r.text("tty", name)
        if "/" in tty or not tty.strip():
            raise r.fail("tty", "a plain name (the symlink <run dir>/<name>.tty)")
    for number, program_name in numbered.items():
        pattern = programs[program_name].part_id
        longest = pattern.format(n=99999, s=9) if pattern else ""
        if len(longest) > PART_ID_MAX[kind]:
            raise r.fail(
                "programs",
                f"part ids of at most {PART_ID_MAX[kind]} characters for {kind} "
                f"(program {number} {program_name!r} makes {longest!r})",
            )
    d = Station(name, line, "lf-delim", {})
    station = Station(
        name=name,
        line=line,
        type=kind,  # type: ignore[arg-type]
        programs=numbered,
        port=port,
        tty=tty,
        device_id=r.integer("device_id", DEFAULT_DEVICE_ID.get(kind, 1), minimum=1),
        serial=r.text("serial", f"SIM-{name}"),
        batch_cycles=r.integer("batch_cycles", d.batch_cycles, minimum=1),
        seal_leak_sccm=r.quantity("seal_leak", "leak", f"{d.seal_leak_sccm} sccm"),
        seal_wear_sccm=r.quantity("seal_wear", "leak", f"{d.seal_wear_sccm} sccm"),
        noise_pa=r.quantity("noise", "pressure", f"{d.noise_pa} Pa"),
        resolution_pa=r.quantity("resolution", "pressure", f"{d.resolution_pa} Pa"),
        load_s=r.pair("load", d.load_s, "time"),
        pause_probability=r.fraction("pause_probability", d.pause_probability),
        pause_s=r.pair("pause", d.pause_s, "time"),
        min_cycle_s=r.quantity("min_cycle", "time", f"{d.min_cycle_s} s"),
        first_cycle=r.integer("first_cycle", 1, minimum=1),
        bus=r.text("bus", name) if kind in BUS_TYPES else None,
        address=r.integer("address", 1, minimum=0) if kind in BUS_TYPES else 1,
        trace_interval_s=(r.quantity("trace_interval", "time", "0 s")
                          if kind in TRACE_TYPES else 0.0),
    )
    if station.trace_interval_s and not 0.01 <= station.trace_interval_s <= 1.0:
        raise r.fail("trace_interval", "a sample interval from 10 ms to 1 s")
    if station.address > 99:
        raise r.fail("address", "a station address 0..99 (two digits on the line)")
    if station.device_id > 247:
        raise r.fail("device_id", "a Modbus device id 1..247")
    r.done()
    return station


def _faults(r: _Reader, kind: str) -> Faults:
    d = Faults()
    link = r.raw("link_drop")
    every: float | None = None
    down = d.link_drop_down_s
    if link is not None:
        lr = _Reader(r.source, link, r.key("link_drop"))
        every = lr.quantity("every", "time", positive=True)
        down = lr.quantity("down", "time", f"{d.link_drop_down_s} s", positive=True)
        lr.done()
    slow = _Reader(r.source, r.raw("slow", {}), r.key("slow"))
    exc = _Reader(r.source, r.raw("modbus_exception", {}), r.key("modbus_exception"))
    torn = _Reader(r.source, r.raw("torn", {}), r.key("torn"))
    faults = Faults(
        link_drop_every_s=every,
        link_drop_down_s=down,
        garbage=r.fraction("garbage"),
        truncated=r.fraction("truncated"),
        duplicate=r.fraction("duplicate"),
        clock_offset_s=r.quantity("clock_offset", "time", "0 s"),
        slow_probability=slow.fraction("probability"),
        slow_delay_s=slow.quantity("delay", "time", f"{d.slow_delay_s} s", positive=True),
        exception_probability=exc.fraction("probability"),
        exception_code=exc.integer("code", d.exception_code, minimum=1),
        torn_probability=torn.fraction("probability"),
        torn_gap_s=torn.quantity("gap", "time", f"{d.torn_gap_s} s", positive=True),
        reset_after=r.integer("reset_after", 0, minimum=0),
    )
    for sub in (slow, exc, torn):
        sub.done()
    if kind not in LINE_TYPES and (faults.garbage or faults.truncated or faults.duplicate):
        raise r.fail(
            "garbage",
            f"garbage/truncated/duplicate only on line stations ({', '.join(LINE_TYPES)})",
        )
    if kind not in MODBUS_TYPES and (faults.exception_probability or faults.torn_probability):
        raise r.fail(
            "modbus_exception",
            f"modbus_exception/torn only on Modbus stations ({', '.join(MODBUS_TYPES)})",
        )
    if kind not in RING_TYPES and faults.torn_probability:
        raise r.fail("torn", f"torn blocks only on ring stations ({', '.join(RING_TYPES)})")
    if kind in (*STREAM_TYPES, *BUS_TYPES) and faults.slow_probability:
        raise r.fail(
            "slow", "slow answers only on stations that answer requests (lf-kv, lf-mbtcp, lf-mbrtu)"
        )
    if faults.exception_code not in (1, 2, 3, 4, 5, 6, 8, 10, 11):
        raise exc.fail("code", "a Modbus exception code (1, 2, 3, 4, 5, 6, 8, 10, 11)")
    r.done()
    return faults
