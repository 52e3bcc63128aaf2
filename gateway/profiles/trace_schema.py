"""How a station sends a test's pressure curve: ``[trace]`` (serial) or ``[modbus.trace]``.

Stations that keep the curve send it in one of a few shapes, each stated here, never guessed:

- **serial, one line**: a line told apart by ``when`` holds header columns (``columns``: the
  cycle, maybe the role, interval and phase starts) and then every sample, in the dialect's
  separator. It follows the record it belongs to.
- **serial, a block of lines**: a line matching ``when`` opens the block with the header
  columns, each following line holds one sample (its ``sample_column``-th field, 0 = the whole
  line), and a line matching ``end`` closes it. ``max_samples`` bounds the block, so a lost end
  line cannot swallow the records after it.
- **Modbus**: a block of registers with its own counter (bumped once the block is written, as
  a result ring's counter is), header registers and an array of ``count`` samples.

The role (the result's own test, or a calibration's master or master-plus-standard test) comes
from a code table, or is "result" when the station sends only results' curves. Phase starts
are sample indexes (``phase_unit = "sample"``) or times. The samples are gauge pressures in
``unit``. Everything here is shape; the loader checks the units and names, the decoder
(``gateway.profiles.traces``) builds the record.
"""

from __future__ import annotations

from typing import Literal

from pydantic import BaseModel, ConfigDict, Field

__all__ = ["PHASE_NAMES", "TraceBlock", "TraceLine", "TraceRegister", "TraceSamples"]

#: phases a station may report the start of (fill starts at the first sample)
PHASE_NAMES = ("stabilise", "test", "dump")


class _Strict(BaseModel):
    model_config = ConfigDict(extra="forbid", frozen=True, populate_by_name=True)


class TraceWhen(_Strict):
    field: str
    equals: str | list[str] | None = None
    matches: str | None = None


class TraceColumn(_Strict):
    """A header column converted: ``{ from = "interval", unit = "ms" }``."""

    from_: str = Field(alias="from")
    unit: str | None = None
    codes: dict[str, str] | None = None


class _Common(_Strict):
    interval_s: float | None = Field(
        default=None, gt=0, description="a fixed sample interval (s) when the station sends none")
    phase_unit: Literal["sample", "s", "ms"] = Field(
        default="sample", description="how phase starts are counted: sample index, s or ms")


class TraceSamples(_Strict):
    unit: str = Field(description="pressure unit of the samples (gauge), e.g. kPa")
    scale: float = 1.0
    address: int | None = Field(default=None, ge=0, le=65535, description="Modbus: first sample")
    type: str | None = Field(default=None, description="Modbus: uint16, int16, float32, ...")
    max: int = Field(default=4000, ge=2, le=100_000,
                     description="more samples than this is not a curve of this station")


class TraceLine(_Common):
    """``[trace]`` of a serial profile (delimited dialect)."""

    layout: Literal["line", "block"] = "line"
    when: TraceWhen
    end: TraceWhen | None = Field(default=None, description="block: the line that closes it")
    columns: list[str] = Field(min_length=1, description="header columns before the samples")
    cycle: str = Field(description="header column with the cycle number")
    role: TraceColumn | None = None
    interval: TraceColumn | None = None
    phases: dict[str, str] = Field(default_factory=dict,
                                   description="phase name → header column with its start")
    samples: TraceSamples
    sample_column: int = Field(default=0, ge=0,
                               description="block: the field of a sample line holding it")


class TraceRegister(_Strict):
    """A header value of a Modbus trace block: ``{ address = 1005, type = "uint16" }``."""

    address: int = Field(ge=0, le=65535)
    type: Literal["uint16", "int16", "uint32", "int32"] = "uint16"
    unit: str | None = None
    codes: dict[str, str] | None = None


class TraceBlock(_Common):
    """``[modbus.trace]``: the newest curve in registers, guarded by its own counter."""

    counter_address: int = Field(ge=0, le=65535)
    counter_type: Literal["uint16", "uint32"] = "uint32"
    cycle: TraceRegister
    count: TraceRegister
    role: TraceRegister | None = None
    interval: TraceRegister | None = None
    phases: dict[str, TraceRegister] = Field(default_factory=dict)
    samples: TraceSamples
