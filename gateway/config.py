"""The gateway configuration (``gateway.toml``): read once, validated completely, then frozen.

Every mistake is one ``ConfigError`` line naming the file, the key and what was expected, and
every station's profile is loaded here too: a gateway that starts is a gateway that is fully
configured. ``--config demo`` is the shipped ``gateway/configs/demo.toml``.

Layout::

    site = "Northmere Works"            # required
    gateway_id = "nw-gw-1"              # default "gateway"
    timezone = "Europe/Berlin"          # default zone of station clocks (default UTC)
    store = "sqlite:///./leakfleet.db"  # journal URL (the default)
    profile_dirs = ["profiles"]         # extra profile directories, relative to this file
    [shifts]                            # passed through untouched (analytics reads it)
    [[standards]]                       # leak-standard register, passed through untouched
                                        #   (analytics reads it: serial, station, nominal,
                                        #   reference_pressure, certificate_date, due_date or
                                        #   interval_months, uncertainty_pct)
    [runtime]                           # tuning: batch_size, max_delay, queue_size,
                                        #   max_pending, reconnect_initial, reconnect_max,
                                        #   offline_after, line_gap; retention = "400 d"
                                        #   prunes what every sink has (default: keep all)
    [metrics]                           # prometheus_port (0 = off, the default), bind (127.0.0.1)
    [sinks.<name>]                      # one table per sink, handed to the sink registry as-is
    [[stations]]
    id = "L1-S1"; line = "L1"; profile = "lf-delim"; endpoint = "tcp://127.0.0.1:15101"
    poll_interval = "1 s"; timeout = "2 s"    # default: the profile's
    timezone = "Europe/Berlin"; programs = { 1 = "HX-210" }
    overrides = { device_id = 7, baudrate = 9600 }
    parameters = { "HX-210" = { reject_limit = "2 sccm" } }   # what the station does not
                                        #   send; also top-level [parameters."HX-210"] and "*"
                                        #   for defaults (gateway.config_params)

Durations are a number of seconds or text with a unit (``"250 ms"``). Endpoints are
``tcp://host:port`` (serial device servers, Modbus TCP), a tty path or a pyserial URL
(``socket://host:port``, ``rfc2217://host:port``); relative tty paths are relative to the
directory the gateway is started in, like the simulator's ``run/sim``.
"""

from __future__ import annotations

import re
import tomllib
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field
from importlib import resources
from pathlib import Path
from typing import TYPE_CHECKING, Any
from zoneinfo import ZoneInfo, ZoneInfoNotFoundError

from gateway.config_params import parse_parameters, station_parameters
from gateway.config_schema import check_config_document
from gateway.drivers.base import Pacing
from gateway.errors import ConfigError, UnitError
from gateway.programs import ProgramParams

if TYPE_CHECKING:
    from gateway.profiles import Profile

__all__ = [
    "DEFAULT_STORE",
    "GatewayConfig",
    "MetricsConfig",
    "RuntimeConfig",
    "StationConfig",
    "load_config",
    "resolve_config_path",
]

DEFAULT_STORE = "sqlite:///./leakfleet.db"
SHIPPED = ("demo", "annex")
_OVERRIDES = {"device_id": int, "baudrate": int, "bytesize": int, "parity": str, "stopbits": float,
              "address": int}
_OVERRIDE_RANGES: dict[str, tuple[Any, str]] = {
    "device_id": (lambda v: 0 <= v <= 255, "a Modbus device id from 0 to 255 (247 on RS-485)"),
    "baudrate": (lambda v: 50 <= v <= 4_000_000, "a baud rate from 50 to 4000000"),
    "bytesize": (lambda v: 5 <= v <= 8, "5, 6, 7 or 8 data bits"),
    "parity": (lambda v: v in ("N", "E", "O", "M", "S"), "N, E, O, M or S"),
    "stopbits": (lambda v: v in (1, 1.5, 2), "1, 1.5 or 2 stop bits"),
    "address": (lambda v: 0 <= v <= 255, "a station address on its serial line from 0 to 255"),
}


@dataclass(frozen=True)
class StationConfig:
    id: str
    line: str
    profile: Profile
    endpoint: str
    poll_interval_s: float
    timeout_s: float
    timeout_explicit: bool
    timezone: str
    programs: Mapping[int, str]
    overrides: Mapping[str, Any]
    # the plant's values for what the station does not send (gateway.config_params)
    program_params: Mapping[str, ProgramParams] = field(default_factory=dict)
    traces: bool = False  # collect the station's pressure curves (its profile says how)


@dataclass(frozen=True)
class RuntimeConfig:
    batch_size: int = 500
    # extra wait for company before a commit; 0 = group commit: write whatever is pending as
    # soon as the writer is free (batches still grow under load, while the last write runs)
    max_delay_s: float = 0.0
    queue_size: int = 2000
    max_pending: int = 100_000
    pacing: Pacing = field(default_factory=Pacing)
    # journal rows older than this go, once every enabled sink has them (None = keep all)
    retention_s: float | None = None
    # pressure curves older than this go sooner than the results (once every sink has them)
    trace_retention_s: float | None = None


@dataclass(frozen=True)
class MetricsConfig:
    prometheus_port: int = 0  # 0 = off
    bind: str = "127.0.0.1"

    @property
    def enabled(self) -> bool:
        return self.prometheus_port > 0


@dataclass(frozen=True)
class GatewayConfig:
    source: str
    site: str
    gateway_id: str
    timezone: str
    store: str
    profile_dirs: tuple[Path, ...]
    stations: tuple[StationConfig, ...]
    shifts: Mapping[str, Any] = field(default_factory=dict)
    standards: tuple[Mapping[str, Any], ...] = ()
    runtime: RuntimeConfig = field(default_factory=RuntimeConfig)
    metrics: MetricsConfig = field(default_factory=MetricsConfig)
    sinks: Mapping[str, Mapping[str, Any]] = field(default_factory=dict)
    alarms: Mapping[str, float | int | None] = field(default_factory=dict)  # parse_alarms


def resolve_config_path(ref: str | Path) -> Path:
    """A shipped config name (``demo``) or a path."""
    text = str(ref)
    if text in SHIPPED:
        with resources.as_file(resources.files("gateway.configs") / f"{text}.toml") as p:
            return Path(p)
    return Path(text)


_USERINFO = re.compile(r"(?<=://)[^/@\s'\"]*@")
_SECRET_PARAM = re.compile(r"(?i)\b(token|password|passwd|pwd|secret|key)=[^&\s'\"]*")


def _redact(text: str) -> str:
    """A value echoed in an error, without URL credentials (user:password@, token=...)."""
    return _SECRET_PARAM.sub(r"\1=***", _USERINFO.sub("***@", text))


class _Reader:
    """Typed access to a TOML table that names file and key in every complaint."""

    def __init__(self, file: str) -> None:
        self.file = file

    def fail(self, key: str, expected: str, got: object = ...) -> ConfigError:
        tail = "" if got is ... else f", got {_redact(repr(got))}"
        return ConfigError(f"{self.file}: {key}: expected {expected}{tail}")

    def table(self, data: Any, key: str) -> dict[str, Any]:
        if not isinstance(data, dict):
            raise self.fail(key, "a table", data)
        return data

    def known(self, data: Mapping[str, Any], prefix: str, allowed: Sequence[str]) -> None:
        for k in data:
            if k not in allowed:
                raise self.fail(
                    f"{prefix}{k}", f"one of the keys {', '.join(allowed)} (unknown key)"
                )

    def text(self, data: Mapping[str, Any], key: str, prefix: str = "", default: Any = ...) -> str:
        if key not in data:
            if default is ...:
                raise self.fail(prefix + key, "a value (required)")
            return str(default)
        value = data[key]
        if not isinstance(value, str) or not value.strip():
            raise self.fail(prefix + key, "a non-empty string", value)
        if any(ord(c) < 32 or ord(c) == 127 for c in value):
            # a newline in an id would forge lines in logs and in --check output
            raise self.fail(prefix + key, "one line of text without control characters",
                            value.encode("unicode_escape").decode("ascii"))
        return value.strip()

    def integer(
        self, data: Mapping[str, Any], key: str, prefix: str, default: int, lo: int, hi: int
    ) -> int:
        value = data.get(key, default)
        if isinstance(value, bool) or not isinstance(value, int) or not lo <= value <= hi:
            raise self.fail(prefix + key, f"an integer from {lo} to {hi}", value)
        return value

    def duration(
        self, data: Mapping[str, Any], key: str, prefix: str, default: float | None
    ) -> float | None:
        if key not in data:
            return default
        value = data[key]
        if isinstance(value, bool):
            raise self.fail(prefix + key, "a duration (seconds, or text like '250 ms')", value)
        if isinstance(value, (int, float)):
            seconds = float(value)
        elif isinstance(value, str):
            from gateway.units import parse_quantity

            try:
                seconds = parse_quantity(value, "time", default_unit="s").canonical
            except UnitError as exc:
                raise self.fail(prefix + key, f"a duration ({exc})") from None
        else:
            raise self.fail(prefix + key, "a duration (seconds, or text like '250 ms')", value)
        if not seconds >= 0.001 or seconds > 86400:
            raise self.fail(prefix + key, "a duration from 1 ms to a day", value)
        return seconds

    def zone(self, value: str, key: str) -> str:
        try:
            ZoneInfo(value)
        except (ZoneInfoNotFoundError, ValueError):
            raise self.fail(key, "an IANA time zone such as 'Europe/Berlin'", value) from None
        return value


_TOP = ("site", "gateway_id", "timezone", "store", "profile_dirs", "shifts", "standards",
        "runtime", "alarms", "metrics", "sinks", "parameters", "stations")
_ALARMS = ("calibration_interval", "reject_streak", "reject_window", "reject_rate",
           "silent_factor", "silent_min", "garbage_per_10min", "backlog_age", "clock_ahead",
           "gap_window", "standard_due_days")
_STATION = ("id", "line", "profile", "endpoint", "poll_interval", "timeout", "timezone",
            "programs", "overrides", "parameters", "traces")
_RUNTIME = ("batch_size", "max_delay", "queue_size", "max_pending", "reconnect_initial",
            "reconnect_max", "offline_after", "line_gap", "retention", "trace_retention")


def load_config(
    ref: str | Path,
    *,
    store: str | None = None,
    profile_dirs: Sequence[Path] = (),
) -> GatewayConfig:
    """Read and validate a gateway config (a path or ``demo``); ConfigError on any mistake."""
    path = resolve_config_path(ref)
    file = str(ref) if str(ref) in SHIPPED else str(path)
    try:
        doc = tomllib.loads(path.read_text(encoding="utf-8"))
    except FileNotFoundError:
        raise ConfigError(f"{file}: no such config file") from None
    except OSError as exc:
        raise ConfigError(f"{file}: cannot read: {exc.strerror or exc}") from None
    except UnicodeDecodeError:
        raise ConfigError(f"{file}: expected a UTF-8 TOML file") from None
    except tomllib.TOMLDecodeError as exc:
        raise ConfigError(f"{file}: not valid TOML: {exc}") from None
    return parse_config(doc, file, base_dir=path.parent, store=store, profile_dirs=profile_dirs)


def parse_config(
    doc: dict[str, Any],
    file: str,
    *,
    base_dir: Path = Path("."),
    store: str | None = None,
    profile_dirs: Sequence[Path] = (),
) -> GatewayConfig:
    check_config_document(doc, file)  # types, choices, ranges (gateway.config_schema)
    r = _Reader(file)
    r.known(doc, "", _TOP)
    site = r.text(doc, "site")
    gateway_id = r.text(doc, "gateway_id", default="gateway")
    timezone = r.zone(r.text(doc, "timezone", default="UTC"), "timezone")
    store_url = store or r.text(doc, "store", default=DEFAULT_STORE)
    _check_store(r, store_url, "store" if store is None else "--store")

    dirs_raw = doc.get("profile_dirs", [])
    if not isinstance(dirs_raw, list) or not all(isinstance(d, str) for d in dirs_raw):
        raise r.fail("profile_dirs", "a list of directory paths", dirs_raw)
    dirs = tuple(Path(p) for p in profile_dirs) + tuple(
        (base_dir / d) if not Path(d).is_absolute() else Path(d) for d in dirs_raw
    )
    for d in dirs:
        if not d.is_dir():
            raise r.fail("profile_dirs", "existing directories", str(d))

    shifts = r.table(doc.get("shifts", {}), "shifts")
    for name, start in shifts.items():
        if not isinstance(start, str) or not _HHMM.fullmatch(start.strip()):
            raise r.fail(f"shifts.{name}", 'a start time "HH:MM" from 00:00 to 23:59', start)
    standards_raw = doc.get("standards", [])
    if not isinstance(standards_raw, list):
        raise r.fail("standards", "an array of [[standards]] tables", standards_raw)
    standards = tuple(r.table(t, f"standards[{i}]") for i, t in enumerate(standards_raw))
    runtime = _runtime(r, r.table(doc.get("runtime", {}), "runtime"))
    alarms = parse_alarms(doc.get("alarms", {}), file)
    metrics = _metrics(r, r.table(doc.get("metrics", {}), "metrics"))
    sinks_raw = r.table(doc.get("sinks", {}), "sinks")
    sinks = {name: r.table(t, f"sinks.{name}") for name, t in sinks_raw.items()}

    sheet = parse_parameters(doc.get("parameters", {}), "parameters", r.fail)

    raw_stations = doc.get("stations")
    if not isinstance(raw_stations, list) or not raw_stations:
        raise r.fail("stations", "at least one [[stations]] table", raw_stations)
    stations = tuple(
        _station(r, r.table(s, f"stations[{i}]"), i, timezone, dirs, sheet)
        for i, s in enumerate(raw_stations)
    )
    _check_buses(r, stations)
    return GatewayConfig(
        source=file,
        site=site,
        gateway_id=gateway_id,
        timezone=timezone,
        store=store_url,
        profile_dirs=dirs,
        stations=stations,
        shifts=shifts,
        standards=standards,
        runtime=runtime,
        metrics=metrics,
        sinks=sinks,
        alarms=alarms,
    )


_HHMM = re.compile(r"([01]\d|2[0-3]):[0-5]\d")
_SQLITE_HEADER = b"SQLite format 3\x00"


def _check_store(r: _Reader, url: str, key: str) -> None:
    scheme = url.partition("://")[0].lower() if "://" in url else "sqlite"
    if scheme != "sqlite":
        raise r.fail(key, "a journal URL sqlite:///path/file.db (the journal is SQLite)", url)
    if "://" in url and not url.partition("://")[2].startswith("/"):
        raise r.fail(key, "sqlite:///relative/path.db or sqlite:////absolute/path.db", url)
    path = Path(url.partition("://")[2][1:] if "://" in url else url)
    try:
        with path.open("rb") as fh:
            head = fh.read(len(_SQLITE_HEADER))
    except FileNotFoundError:
        return  # created at start
    except OSError as exc:
        raise r.fail(key, f"a journal file this user can read ({exc.strerror})", url) from None
    if head and head != _SQLITE_HEADER:
        raise r.fail(key, "a SQLite journal (that file is something else)", url)


def _retention(r: _Reader, t: dict[str, Any], p: str, key: str = "retention") -> float | None:
    """``retention = "400 d"`` (days; pruning runs hourly, so at least one day)."""
    if key not in t:
        return None
    value = t[key]
    expect = "a number of days of at least 1, such as '400 d' or '90 days'"
    m = re.fullmatch(r"\s*(\d+(?:\.\d+)?)\s*(?:d|days?)\s*", value) if isinstance(
        value, str) else None
    days = float(m.group(1)) if m else 0.0
    if not 1 <= days <= 36_600:
        raise r.fail(p + key, expect, value)
    return days * 86400.0


def parse_alarms(table: Any, file: str) -> dict[str, float | int | None]:
    """``[alarms]``: the rules' thresholds, durations in seconds (only the keys given; the
    rules' own defaults fill the rest). Shared with the dashboard, which reads the same file."""
    r = _Reader(file)
    t = r.table(table, "alarms")
    p = "alarms."
    r.known(t, p, _ALARMS)
    out: dict[str, float | int | None] = {}
    for key in ("silent_min", "backlog_age", "clock_ahead", "gap_window"):
        if key in t:
            out[key] = r.duration(t, key, p, None)
    if "calibration_interval" in t:
        value = t["calibration_interval"]
        try:
            from gateway.units import parse_quantity

            seconds = (float(value) if isinstance(value, int | float) and not isinstance(
                value, bool) else parse_quantity(str(value), "time", default_unit="s").canonical)
        except (UnitError, ValueError):
            raise r.fail(p + "calibration_interval", "a duration such as '8 h' or '7 d'",
                         value) from None
        if not 60 <= seconds <= 366 * 86400:
            raise r.fail(p + "calibration_interval", "a duration from 1 min to a year", value)
        out["calibration_interval"] = seconds
    for key, lo, hi in (("reject_streak", 2, 1000), ("reject_window", 5, 100_000),
                        ("garbage_per_10min", 0, 1_000_000), ("standard_due_days", 0, 366)):
        if key in t:
            out[key] = r.integer(t, key, p, 0, lo, hi)
    for key, low, high in (("reject_rate", 0.0, 1.0), ("silent_factor", 1.0, 1000.0)):
        if key in t:
            number = t[key]
            if isinstance(number, bool) or not isinstance(number, int | float) or not (
                    low < number <= high):
                raise r.fail(p + key, f"a number above {low:g}, at most {high:g}", number)
            out[key] = float(number)
    return out


def _runtime(r: _Reader, t: dict[str, Any]) -> RuntimeConfig:
    p = "runtime."
    r.known(t, p, _RUNTIME)
    initial = r.duration(t, "reconnect_initial", p, 0.5)
    cap = r.duration(t, "reconnect_max", p, 30.0)
    assert initial is not None and cap is not None
    if cap < initial:
        raise r.fail(p + "reconnect_max", f"at least reconnect_initial ({initial:g} s)", cap)
    pacing = Pacing(
        backoff_initial_s=initial,
        backoff_max_s=cap,
        offline_after=r.integer(t, "offline_after", p, 3, 1, 1000),
        line_gap_s=r.duration(t, "line_gap", p, 0.25) or 0.25,
    )
    max_delay = r.duration(t, "max_delay", p, 0.0) or 0.0
    if max_delay > 0.2:
        raise r.fail(p + "max_delay", "at most 0.2 s (results are committed within 250 ms)",
                     t.get("max_delay"))
    retention = _retention(r, t, p)
    trace_retention = _retention(r, t, p, "trace_retention")
    if trace_retention is not None and retention is not None and trace_retention > retention:
        raise r.fail(p + "trace_retention", f"at most retention ({retention / 86400:g} d): "
                     "curves are kept no longer than results", t["trace_retention"])
    return RuntimeConfig(
        retention_s=retention,
        trace_retention_s=trace_retention,
        batch_size=r.integer(t, "batch_size", p, 500, 1, 100_000),
        max_delay_s=max_delay,
        queue_size=r.integer(t, "queue_size", p, 2000, 1, 1_000_000),
        max_pending=r.integer(t, "max_pending", p, 100_000, 100, 10_000_000),
        pacing=pacing,
    )


def _metrics(r: _Reader, t: dict[str, Any]) -> MetricsConfig:
    r.known(t, "metrics.", ("prometheus_port", "bind"))
    port = r.integer(t, "prometheus_port", "metrics.", 0, 0, 65535)
    bind = r.text(t, "bind", "metrics.", default="127.0.0.1")
    return MetricsConfig(prometheus_port=port, bind=bind)


def _station(
    r: _Reader, t: dict[str, Any], i: int, zone: str, dirs: Sequence[Path],
    sheet: Mapping[str, ProgramParams],
) -> StationConfig:
    sid = t.get("id")
    clean = isinstance(sid, str) and sid.isprintable()
    p = f"stations[{sid}]." if clean else f"stations[{i}]."
    r.known(t, p, _STATION)
    sid = r.text(t, "id", p)
    line = r.text(t, "line", p)
    endpoint = r.text(t, "endpoint", p)
    ref = r.text(t, "profile", p)
    from gateway.profiles import load_profile

    try:
        profile = load_profile(ref, dirs)
    except ConfigError as exc:
        raise ConfigError(f"{r.file}: {p}profile: {exc}") from None
    _check_endpoint(r, endpoint, p + "endpoint", profile)

    if profile.modbus is not None:
        poll_default, timeout_default = profile.modbus.poll_interval_s, profile.modbus.timeout_s
    else:
        assert profile.serial is not None
        poll_default = 1.0
        timeouts = [q.timeout_s for q in profile.serial.requests] or [2.0]
        timeout_default = max(timeouts)
    poll = r.duration(t, "poll_interval", p, poll_default)
    timeout = r.duration(t, "timeout", p, timeout_default)
    assert poll is not None and timeout is not None

    programs_raw = r.table(t.get("programs", {}), p + "programs")
    programs: dict[int, str] = {}
    for k, v in programs_raw.items():
        if not (str(k).isascii() and str(k).isdigit()) or not isinstance(v, str) or not v.strip():
            raise r.fail(f"{p}programs.{k}", "program number = \"program name\"", v)
        programs[int(k)] = v.strip()

    overrides = r.table(t.get("overrides", {}), p + "overrides")
    for k, v in overrides.items():
        want = _OVERRIDES.get(k)
        if want is None:
            raise r.fail(f"{p}overrides.{k}", f"one of {', '.join(_OVERRIDES)} (unknown key)")
        if isinstance(v, bool) or not isinstance(v, (want, int) if want is float else want):
            kind = {int: "an integer", float: "a number", str: "a string"}[want]
            raise r.fail(f"{p}overrides.{k}", kind, v)
        allowed, what = _OVERRIDE_RANGES[k]
        if not allowed(v):
            raise r.fail(f"{p}overrides.{k}", what, v)

    serial = profile.serial
    if (serial is not None and any(req.addressed for req in serial.requests)
            and "address" not in overrides):
        raise r.fail(f"{p}overrides.address", f"the station's address (profile {profile.label} "
                     "asks each station by its address), e.g. overrides = { address = 1 }")
    traces = t.get("traces", False)
    if not isinstance(traces, bool):
        raise r.fail(p + "traces", "true or false", traces)
    described = (profile.serial.trace if profile.serial is not None
                 else profile.modbus.trace if profile.modbus is not None else None)
    if traces and described is None:
        raise r.fail(p + "traces", f"false: profile {profile.label} does not describe how the "
                     "station sends pressure curves (add [trace] or [modbus.trace])", traces)
    return StationConfig(
        id=sid,
        line=line,
        profile=profile,
        endpoint=endpoint,
        poll_interval_s=poll,
        timeout_s=timeout,
        timeout_explicit="timeout" in t,
        timezone=r.zone(r.text(t, "timezone", p, default=zone), p + "timezone"),
        programs=programs,
        overrides=dict(overrides),
        program_params=station_parameters(
            sheet, parse_parameters(t.get("parameters", {}), p + "parameters", r.fail)
        ),
        traces=traces,
    )


def _check_endpoint(r: _Reader, endpoint: str, key: str, profile: Profile) -> None:
    from gateway.drivers.lines import split_host_port

    scheme = endpoint.partition("://")[0].lower() if "://" in endpoint else ""
    if scheme and "@" in endpoint.partition("://")[2]:
        # stations take no credentials; one here would end up in logs and status pages
        raise r.fail(key, f"{scheme}://host:port without user or password", endpoint)
    if scheme in ("tcp", "socket", "rfc2217"):
        try:
            split_host_port(endpoint.partition("://")[2])
        except ValueError:
            raise r.fail(key, f"{scheme}://host:port", endpoint) from None
    elif scheme:
        raise r.fail(key, "tcp://host:port, socket://host:port, rfc2217://host:port or a tty path",
                     endpoint)
    elif ":/" in endpoint or re.fullmatch(r"[\w.-]+:\d+", endpoint):
        # "tcp:/host:4001", "htp:/x" or "host:4001" would be taken for a serial device path
        raise r.fail(key, "tcp://host:port (two slashes) or a tty path such as /dev/ttyUSB0",
                     endpoint)
    if profile.modbus is not None:
        if profile.modbus.framer == "tcp" and scheme != "tcp":
            raise r.fail(key, f"tcp://host:port for Modbus TCP profile {profile.label}", endpoint)
        if scheme in ("socket", "rfc2217"):
            raise r.fail(key, "tcp://host:port or a tty path for a Modbus RTU station", endpoint)


def _addressed(st: StationConfig) -> bool:
    spec = st.profile.serial
    return (spec is not None and spec.mode == "request"
            and all(req.addressed for req in spec.requests))


def _check_serial_bus(r: _Reader, endpoint: str, group: Sequence[StationConfig]) -> None:
    """Serial stations share a line only when every query names an address (RS-485 style),
    each station has its own address and all use the same line settings."""
    names = ", ".join(s.id for s in group)
    lone = next((s for s in group if not _addressed(s)), None)
    if lone is not None:
        raise r.fail(
            f"stations[{lone.id}].endpoint",
            f"an endpoint of its own (a serial station whose queries name no {{address}} "
            f"cannot share {endpoint} with {names})",
        )
    addresses = [s.overrides.get("address") for s in group]
    if len(set(addresses)) != len(addresses):
        raise r.fail(f"stations[{group[1].id}].overrides.address",
                     f"distinct station addresses on the shared line {endpoint} ({names})",
                     addresses)
    settings = set()
    for s in group:
        spec = s.profile.serial
        assert spec is not None
        settings.add(tuple(s.overrides.get(k, getattr(spec, k))
                           for k in ("baudrate", "bytesize", "parity", "stopbits")))
    if len(settings) > 1:
        raise r.fail(f"stations[{group[1].id}].profile",
                     f"the same baud rate, data bits, parity and stop bits on {endpoint}")


def _check_buses(r: _Reader, stations: Sequence[StationConfig]) -> None:
    seen: dict[str, StationConfig] = {}
    on_bus: dict[str, list[StationConfig]] = {}
    for st in stations:
        if st.id in seen:
            raise r.fail(f"stations[{st.id}].id", "a station id used once", st.id)
        seen[st.id] = st
        on_bus.setdefault(st.endpoint, []).append(st)
    for endpoint, group in on_bus.items():
        if len(group) == 1:
            continue
        names = ", ".join(s.id for s in group)
        if any(s.profile.modbus is None for s in group):
            _check_serial_bus(r, endpoint, group)
            continue
        specs = [s.profile.modbus for s in group if s.profile.modbus is not None]
        ids = [s.overrides.get("device_id", m.device_id) for s, m in zip(group, specs, strict=True)]
        if len(set(ids)) != len(ids):
            raise r.fail(
                f"stations[{group[1].id}].overrides.device_id",
                f"distinct device ids on the shared bus {endpoint} ({names})",
                ids,
            )
        framers = {m.framer for m in specs}
        if len(framers) > 1:
            raise r.fail(f"stations[{group[1].id}].profile", f"one framer per bus {endpoint}")
