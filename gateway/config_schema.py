"""The shape of ``gateway.toml`` as pydantic models: checked first by ``load_config`` and
exported as JSON Schema (``schemas/gateway-config.schema.json``) for editors.

Types, choices and ranges are stated here; what needs the files around (profiles, the
journal's header, directories) or several keys at once (stations sharing a bus) is the
loader's second pass in ``gateway.config``. See docs/gateway-config.md for every key.
"""

from __future__ import annotations

from datetime import date
from typing import Any, Literal

from pydantic import BaseModel, ConfigDict, Field

from gateway.profiles.schema import check_with

__all__ = ["GatewayDocument", "check_config_document", "config_json_schema"]

Duration = float | str  # seconds, or text with a unit ("250 ms")
Quantity = str | float


class _Table(BaseModel):
    model_config = ConfigDict(extra="forbid")


class Runtime(_Table):
    batch_size: int = Field(default=500, ge=1, le=100_000)
    max_delay: Duration = 0.0
    queue_size: int = Field(default=2000, ge=1, le=1_000_000)
    max_pending: int = Field(default=100_000, ge=100, le=10_000_000)
    reconnect_initial: Duration = 0.5
    reconnect_max: Duration = 30.0
    offline_after: int = Field(default=3, ge=1, le=1000)
    line_gap: Duration = 0.25
    retention: Duration | None = None
    trace_retention: Duration | None = Field(
        default=None, description="days pressure curves are kept (at most retention)")


class Alarms(_Table):
    """Thresholds of the alarm rules (common-practice defaults; docs/gateway-config.md)."""

    calibration_interval: Duration | None = Field(
        default=None, description="a station's calibration is overdue after this (off if unset)")
    reject_streak: int = Field(default=3, ge=2, le=1000)
    reject_window: int = Field(default=50, ge=5, le=100_000)
    reject_rate: float = Field(default=0.15, gt=0, le=1)
    silent_factor: float = Field(default=5.0, ge=1, le=1000)
    silent_min: Duration = 300.0
    garbage_per_10min: int = Field(default=20, ge=0, le=1_000_000)
    backlog_age: Duration = 300.0
    clock_ahead: Duration = 120.0
    gap_window: Duration = 3600.0
    standard_due_days: int = Field(default=30, ge=0, le=366)


class Metrics(_Table):
    prometheus_port: int = Field(default=0, ge=0, le=65535)
    bind: str = "127.0.0.1"


class Standard(BaseModel):
    model_config = ConfigDict(extra="allow")  # read by the reports, which name their keys

    serial: str | None = None
    station: str | None = None
    nominal: Quantity | None = None
    reference_pressure: Quantity | None = None
    certificate_date: date | str | None = None
    due_date: date | str | None = None
    interval_months: int | None = Field(default=None, ge=1)
    uncertainty_pct: float | None = Field(default=None, ge=0)


class Parameters(_Table):
    """The plant's values for what a station does not send, per program."""

    reject_limit: Quantity | None = None
    lower_limit: Quantity | None = None
    fill: Duration | None = None
    stabilise: Duration | None = None
    test: Duration | None = None
    test_pressure: Quantity | None = None
    part_family: str | None = None
    standard: Quantity | None = None
    standard_reference_pressure: Quantity | None = None


class Overrides(_Table):
    device_id: int | None = Field(default=None, ge=0, le=255)
    baudrate: int | None = Field(default=None, ge=50, le=4_000_000)
    bytesize: int | None = Field(default=None, ge=5, le=8)
    parity: Literal["N", "E", "O", "M", "S"] | None = None
    stopbits: float | None = Field(default=None, json_schema_extra={"enum": [1, 1.5, 2]})
    address: int | None = Field(default=None, ge=0, le=255)


class Station(_Table):
    id: str = Field(min_length=1)
    line: str = Field(min_length=1)
    profile: str = Field(min_length=1, description="built-in name, name@version or a path")
    endpoint: str = Field(min_length=1,
                          description="tcp://host:port, socket://, rfc2217:// or a tty path")
    poll_interval: Duration | None = None
    timeout: Duration | None = None
    timezone: str | None = None
    programs: dict[str, str] = {}
    overrides: Overrides = Field(default_factory=Overrides)
    parameters: dict[str, Parameters] = {}
    traces: bool = Field(default=False,
                         description="collect the station's pressure curves (profile [trace])")


class GatewayDocument(_Table):
    """A leakfleet gateway configuration (TOML)."""

    model_config = ConfigDict(extra="forbid",
                              json_schema_extra={"title": "leakfleet gateway configuration"})

    site: str = Field(min_length=1)
    gateway_id: str = "gateway"
    timezone: str = "UTC"
    store: str = "sqlite:///./leakfleet.db"
    profile_dirs: list[str] = []
    shifts: dict[str, str] = {}
    standards: list[Standard] = []
    runtime: Runtime = Field(default_factory=Runtime)
    alarms: Alarms = Field(default_factory=Alarms)
    metrics: Metrics = Field(default_factory=Metrics)
    sinks: dict[str, dict[str, Any]] = {}
    parameters: dict[str, Parameters] = {}
    stations: list[Station] = Field(min_length=1)


_SECOND_PASS = ("extra_forbidden", "missing", "too_short")


def check_config_document(doc: dict[str, Any], file: str) -> None:
    """``load_config``'s first pass: types, choices and ranges of every value (unknown and
    missing keys are named, with the keys known, by the second)."""
    check_with(GatewayDocument, doc, file, _SECOND_PASS)


def config_json_schema() -> dict[str, Any]:
    schema = GatewayDocument.model_json_schema()
    schema["$schema"] = "https://json-schema.org/draft/2020-12/schema"
    return schema
