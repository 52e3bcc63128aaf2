"""Curves on a serial line: one line of samples, or a block of sample lines (``[trace]``).

``TraceCollector.take`` is offered every delimited line before the record kinds are tried; it
answers None for a line that is none of its business. Within a block it owns every line until
the end line. A block cut short by a new record (its end line lost) goes to quarantine with
what arrived, and the record is then read as usual. When the plant has not switched trace
collection on for the station, curves are recognised and dropped (``dropped`` counts them),
never quarantined as garbage.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass, field
from datetime import datetime

from gateway.profiles.model import Parsed, StationContext
from gateway.profiles.normalise import reject
from gateway.profiles.trace_schema import TraceLine
from gateway.profiles.traces import (
    TraceError,
    TraceHeader,
    build_trace,
    header_from_line,
    line_matcher,
    sample_reader,
    tie,
)
from gateway.records import CalibrationEvent, PressureTrace, TestResult

__all__ = ["TraceCollector"]


@dataclass
class _Block:
    header: TraceHeader | None
    error: str | None
    raw: list[str] = field(default_factory=list)
    samples: list[float] = field(default_factory=list)
    line_no: int = 0


class TraceCollector:
    """Turns a station's trace lines into ``PressureTrace`` records (or quarantine)."""

    def __init__(self, spec: TraceLine, ctx: StationContext, label: str) -> None:
        self.spec = spec
        self.ctx = ctx
        self.label = label
        self._opens = line_matcher(spec.when, spec.columns)
        self._closes = (line_matcher(spec.end, [spec.end.field]) if spec.end is not None
                        else None)
        self._to_pa = sample_reader(spec.samples.unit, spec.samples.scale)
        self._block: _Block | None = None
        self.last_result: TestResult | None = None
        self.last_calibration: CalibrationEvent | None = None
        self.dropped = 0
        self.pending: list[Parsed] = []

    def saw(self, record: Parsed) -> None:
        """A record read from the line: the curves after it belong to it."""
        if type(record) is TestResult:
            self.last_result = record
        elif type(record) is CalibrationEvent:
            self.last_calibration = record

    def take(self, parts: Sequence[str], raw: str, line_no: int,
             received_at: datetime) -> list[Parsed] | None:
        """The records this line completes ([] while a block is open), or None: not a curve
        (then ``pop_pending`` may hold a block the line cut short)."""
        block = self._block
        if block is not None:
            return self._in_block(block, parts, raw, line_no, received_at)
        if not self._opens(parts):
            return None
        try:
            header: TraceHeader | None = header_from_line(self.spec, parts)
            error = None
        except TraceError as exc:
            header, error = None, str(exc)
        if self.spec.layout == "block":
            self._block = _Block(header, error, [raw], line_no=line_no)
            return []
        if header is None:
            return [reject(self.ctx, self.label, raw, error or "bad trace", received_at, line_no)]
        try:
            values = [self._sample(text) for text in parts[len(self.spec.columns):]]
        except TraceError as exc:
            return [reject(self.ctx, self.label, raw, str(exc), received_at, line_no)]
        return self._finish(header, values, raw, line_no, received_at)

    def _in_block(self, block: _Block, parts: Sequence[str], raw: str, line_no: int,
                  received_at: datetime) -> list[Parsed] | None:
        if self._closes is not None and self._closes(parts[:1]):
            self._block = None
            if block.header is None or block.error is not None:
                return [reject(self.ctx, self.label, "\n".join([*block.raw, raw]),
                               block.error or "bad trace", received_at, block.line_no)]
            return self._finish(block.header, block.samples, "\n".join(block.raw[:1]),
                                block.line_no, received_at)
        column = self.spec.sample_column
        try:
            text = parts[column] if column < len(parts) else ""
            value = self._sample(text)
        except TraceError:
            # not a sample: the end line was lost and this line is the next record (or curve)
            self._block = None
            self.pending.append(reject(
                self.ctx, self.label, "\n".join(block.raw[:20]),
                f"trace block not closed: {len(block.samples)} samples, then a line that is "
                f"not one", received_at, block.line_no))
            return self.take(parts, raw, line_no, received_at)
        block.samples.append(value)
        if len(block.raw) < 20:
            block.raw.append(raw)
        if len(block.samples) > self.spec.samples.max:
            self._block = None
            return [reject(self.ctx, self.label, "\n".join(block.raw), f"trace block longer "
                           f"than samples.max = {self.spec.samples.max}", received_at,
                           block.line_no)]
        return []

    @property
    def in_block(self) -> bool:
        return self._block is not None

    def cut(self, line_no: int, received_at: datetime) -> None:
        """The open block ended without its end line (a record's line came): to quarantine."""
        block, self._block = self._block, None
        if block is not None:
            self.pending.append(reject(
                self.ctx, self.label, "\n".join(block.raw[:20]),
                f"trace block not closed: {len(block.samples)} samples, then line {line_no} "
                f"is a record", received_at, block.line_no))

    def pop_pending(self) -> list[Parsed]:
        """A block the last line cut short, for quarantine before what the line itself is."""
        out, self.pending = self.pending, []
        return out

    def _sample(self, text: str) -> float:
        try:
            return self._to_pa(float(text))
        except ValueError:
            raise TraceError(f"trace sample {text[:20]!r} is not a number") from None

    def _finish(self, header: TraceHeader, samples: Sequence[float], raw: str, line_no: int,
                received_at: datetime) -> list[Parsed]:
        if not self.ctx.traces:
            self.dropped += 1
            return []
        if len(samples) > self.spec.samples.max:
            return [reject(self.ctx, self.label, raw, f"trace has {len(samples)} samples, "
                           f"samples.max is {self.spec.samples.max}", received_at, line_no)]
        tied = tie(header.role, header.cycle, self.last_result, self.last_calibration)
        try:
            trace: PressureTrace = build_trace(
                header, samples, phase_unit=self.spec.phase_unit, ctx=self.ctx,
                label=self.label, tied=tied, received_at=received_at)
        except TraceError as exc:
            return [reject(self.ctx, self.label, raw, str(exc), received_at, line_no)]
        return [trace]
