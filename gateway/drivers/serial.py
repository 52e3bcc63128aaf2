"""Serial line stations: streaming (listen to every line) and request/response (ask, read answer).

Both run over a ``LineLink`` (a tty, ``socket://`` or ``tcp://``). What a line means is the
profile parser's business; this module only frames lines and answers, stamps them with the time
they arrived and a line number, and turns wire trouble into health changes. Lines the parser
cannot use come back as ``Rejected`` and go to the quarantine with everything else.
"""

from __future__ import annotations

import asyncio
import logging
from collections.abc import Callable, Sequence
from dataclasses import dataclass, field
from datetime import datetime
from typing import TYPE_CHECKING, Any

from gateway.drivers.base import Item, Outbox, Pacing, StationTarget, sleep_for, utcnow
from gateway.drivers.lines import LineLink, RawLine, open_line_link
from gateway.errors import TransportError
from gateway.profiles.decoders import serial_parser
from gateway.records import GapEvent, Rejected, StationState, TestResult

if TYPE_CHECKING:
    from gateway.profiles import SerialSpec

__all__ = ["LineHandler", "read_answer", "run_request_bus", "run_request_station",
           "run_stream_station"]

log = logging.getLogger(__name__)

_IDLE_READ_S = 5.0  # a streaming read wakes this often even on a silent line
LINK_HOLD_S = 5.0  # a stream link that stays open this long (or delivers) counts as up
#: a larger forward jump of the cycle number is taken for a reset or a new counter, not a gap
MAX_SEQUENCE_GAP = 1000


def _spec(target: StationTarget) -> SerialSpec:
    spec = target.profile.serial
    if spec is None:
        raise TransportError(f"{target.station}: profile {target.profile.label} has no serial spec")
    return spec


async def open_for(target: StationTarget) -> LineLink:
    """Open the station's line with its profile's framing and serial settings."""
    spec = _spec(target)
    opts = target.options
    return await open_line_link(
        target.endpoint,
        terminator=spec.terminator,
        max_line=spec.max_line,
        timeout=target.timeout_s,
        baudrate=opts.get("baudrate", spec.baudrate),
        bytesize=opts.get("bytesize", spec.bytesize),
        parity=opts.get("parity", spec.parity),
        stopbits=opts.get("stopbits", spec.stopbits),
        name=target.station,
    )


@dataclass
class LineHandler:
    """Decode, number and parse lines; never raises for what the wire brought."""

    target: StationTarget
    line_no: int = 0
    _parser: Any = field(default=None, init=False)

    def __post_init__(self) -> None:
        self._parser = serial_parser(_spec(self.target), self.target.context)

    @property
    def _encoding(self) -> str:
        return _spec(self.target).encoding

    def text(self, data: bytes) -> str:
        # backslashreplace keeps undecodable bytes visible and exact in the quarantine
        return data.decode(self._encoding, errors="backslashreplace")

    def reject(self, raw: str, reason: str, received_at: datetime, line_no: int | None) -> Rejected:
        return Rejected(
            station=self.target.station,
            profile=self.target.profile.label,
            raw=raw,
            reason=reason,
            received_at=received_at,
            line_no=line_no,
        )

    def parse(self, lines: Sequence[RawLine], received_at: datetime) -> list[Item]:
        """One streamed line, or one whole answer, through the profile's parser."""
        first = self.line_no + 1
        self.line_no += len(lines)
        limit = _spec(self.target).max_line
        # an overlong line is quarantined on its own; the rest of an answer still counts
        cut = [
            self.reject(self.text(line.data),
                        f"line longer than {limit} bytes (cut there, the rest skipped)",
                        received_at, first + i)
            for i, line in enumerate(lines) if line.overlong
        ]  # fmt: skip
        if cut:
            lines = [line for line in lines if not line.overlong]
            if not lines:
                return list(cut)
        texts = [self.text(line.data) for line in lines]
        try:
            return [*cut, *self._parser.parse(texts, first, received_at)]
        except Exception as exc:  # a parser bug must not stop the station; keep the input
            log.exception("%s: parser failed on line %d", self.target.station, first)
            return [*cut, self.reject("\n".join(texts), f"parser error: {exc!r}", received_at,
                                      first)]


async def run_stream_station(
    target: StationTarget,
    outbox: Outbox,
    pacing: Pacing,
    opener: Callable[[StationTarget], Any] = open_for,
) -> None:
    """Listen to a station that talks on its own; reconnect for ever with backoff."""
    health = target.health
    handler = LineHandler(target)
    spec = _spec(target)
    frames = _Frames(spec.frame.start, spec.frame.end, spec.frame.max_lines) \
        if spec.frame is not None else None
    backoff = pacing.backoff()
    while True:
        if frames is not None:
            frames.open = None  # a frame cut by a lost link is never completed
        try:
            link: LineLink = await opener(target)
        except TransportError as exc:
            await _emit(outbox, health.failed(str(exc)))
            await sleep_for(backoff.next())
            continue
        # a link counts as up once it has held (or delivered): a device server that accepts
        # and drops at once must not reset the backoff and flood online/offline statuses
        loop = asyncio.get_running_loop()
        opened, up = loop.time(), False
        try:
            while True:
                raw = await link.read_line(_IDLE_READ_S)
                if not up and (raw is not None or loop.time() - opened >= LINK_HOLD_S):
                    up = True
                    backoff.reset()
                    await _emit(outbox, health.succeeded())
                if raw is None:
                    continue
                if not raw.overlong and not raw.data.strip():
                    continue  # a blank line carries nothing
                # a framed station's lines wait for the end of their frame
                for lines in frames.take(raw) if frames is not None else [[raw]]:
                    items = handler.parse(lines, utcnow())
                    health.last_success = utcnow()
                    await outbox.put(items)
        except TransportError as exc:
            await _emit(outbox, health.failed(str(exc)))
        finally:
            await link.close()
        await sleep_for(backoff.next())


class _Frames:
    """Collects a streamed frame's lines from its start byte to the line with its end byte.

    ``take`` returns what is ready to parse: whole frames, or a single line outside any frame
    (the parser rejects it with its reason). A frame that a new start byte interrupts, or that
    grows past ``max_lines``, goes to the parser as it is and is rejected there, never dropped.
    """

    def __init__(self, start: str, end: str, max_lines: int) -> None:
        self.start, self.end = start.encode("latin-1"), end.encode("latin-1")
        self.max_lines = max_lines
        self.open: list[RawLine] | None = None

    def take(self, raw: RawLine) -> list[list[RawLine]]:
        ready: list[list[RawLine]] = []
        if raw.data.startswith(self.start):
            if self.open is not None:
                ready.append(self.open)  # interrupted by a new frame
            self.open = []
        elif self.open is None:
            return [[raw]]
        self.open.append(raw)
        if self.end in raw.data or len(self.open) >= self.max_lines:
            ready.append(self.open)
            self.open = None
        return ready


@dataclass(frozen=True)
class Answer:
    lines: list[RawLine]
    complete: bool


async def read_answer(
    link: LineLink, end_line: str | None, count: int | None, timeout: float, gap: float,
    encoding: str = "ascii", *, frame_end: str | None = None, empty: str | None = None,
) -> Answer:
    """Lines up to ``end_line`` (excluded), ``count`` lines, or the line holding the frame's
    end byte (included, with its block check); incomplete on timeout or silence.

    ``timeout`` bounds the wait for the first line, ``gap`` the silence between lines once the
    answer has started (a cut-off answer is not waited for the full timeout). A first line
    equal to ``empty`` is a whole answer ("nothing yet").
    """
    end = end_line.encode(encoding) if end_line is not None else None
    stop = frame_end.encode("latin-1") if frame_end is not None else None
    none = empty.encode(encoding) if empty is not None else None
    lines: list[RawLine] = []
    while True:
        raw = await link.read_line(timeout if not lines else gap)
        if raw is None:
            return Answer(lines, complete=False)
        if end is not None and not raw.overlong and raw.data.strip() == end:
            return Answer(lines, complete=True)
        lines.append(raw)
        if stop is not None and not raw.overlong:
            if stop in raw.data or (len(lines) == 1 and raw.data.strip() == none):
                return Answer(lines, complete=True)
            continue
        if count is not None and len(lines) >= count:
            return Answer(lines, complete=True)


@dataclass
class _Asked:
    """One station on a request line: its parser, health and the answers it gave last."""

    target: StationTarget
    handler: LineHandler
    last: dict[bytes, list[bytes]] = field(default_factory=dict)  # stations repeat themselves
    seen: int | None = None  # newest cycle taken (a jump past it is a gap on record)

    def gaps(self, items: Sequence[Item], at: datetime) -> list[Item]:
        """A station that keeps only its newest result loses the ones it ran while nobody
        asked (a dropped link, a gateway restart): the skipped cycle numbers go on record."""
        out: list[Item] = []
        for item in items:
            if not isinstance(item, TestResult):
                continue
            ahead = item.cycle - self.seen if self.seen is not None else 1
            if 1 < ahead <= MAX_SEQUENCE_GAP:
                assert self.seen is not None
                first, last = self.seen + 1, item.cycle - 1
                detail = (f"gap: {ahead - 1} cycle(s) {first}..{last} ran while the station "
                          "was not asked (it keeps only its newest result)")
                log.warning("%s: %s", self.target.station, detail)
                out.append(GapEvent(station=self.target.station, at=at, first=first,
                                    last=last, source="sequence", detail=detail,
                                    line=self.target.context.line))
            if self.seen is None or 0 < ahead <= MAX_SEQUENCE_GAP or ahead < 0:
                self.seen = item.cycle  # the next one, a gap, or a reset (counting again)
        return out


async def run_request_station(
    target: StationTarget,
    outbox: Outbox,
    pacing: Pacing,
    opener: Callable[[StationTarget], Any] = open_for,
) -> None:
    """Poll a station that only speaks when asked, one request after the other."""
    await run_request_bus([target], outbox, pacing, opener)


async def run_request_bus(
    targets: Sequence[StationTarget],
    outbox: Outbox,
    pacing: Pacing,
    opener: Callable[[StationTarget], Any] = open_for,
) -> None:
    """Poll the stations of one request line in turn over one connection (an RS-485 line
    with addressed queries, or a single station); reconnect for ever with backoff."""
    stations = [_Asked(t, LineHandler(t), seen=t.resume_cycle) for t in targets]
    for st in stations:
        st.target.health.offline_after = pacing.offline_after
    backoff = pacing.backoff()
    loop = asyncio.get_running_loop()
    first = targets[0]
    while True:
        try:
            link: LineLink = await opener(first)
        except TransportError as exc:
            for st in stations:
                await _emit(outbox, st.target.health.failed(str(exc), state=StationState.OFFLINE))
            await sleep_for(backoff.next())
            continue
        try:
            while True:
                started = loop.time()
                for st in stations:
                    if await _ask_round(st, link, outbox, pacing):
                        backoff.reset()
                await sleep_for(first.poll_interval_s - (loop.time() - started))
        except TransportError as exc:
            for st in stations:
                await _emit(outbox, st.target.health.failed(str(exc)))
        finally:
            await link.close()
        await sleep_for(backoff.next())


async def _ask_round(st: _Asked, link: LineLink, outbox: Outbox, pacing: Pacing) -> bool:
    """Every request of one station once; True when it answered at all."""
    target, handler = st.target, st.handler
    spec = _spec(target)
    health = target.health
    loop = asyncio.get_running_loop()
    frame_end = spec.frame.end if spec.frame is not None else None
    wire_s, answered = 0.0, 0  # the round's request-to-answer time, for metrics
    for req in spec.requests:
        query = req.query_for(target.context.address)
        await _stale_input(link, handler, req.end_line, outbox)
        asked = loop.time()
        await link.write(query, target.timeout_s)
        timeout = target.timeout_s if target.timeout_explicit else req.timeout_s
        answer = await read_answer(link, req.end_line, req.lines, timeout, pacing.line_gap_s,
                                   spec.encoding, frame_end=frame_end, empty=req.empty)
        received_at = utcnow()
        if answer.lines or answer.complete:
            wire_s += loop.time() - asked
            answered += 1
        if not answer.lines and not answer.complete:
            await _emit(outbox, health.failed(f"no answer to {query!r} within {timeout:g} s"))
            continue
        await _emit(outbox, health.succeeded(received_at))
        if not answer.complete:
            # the cut-off line's start (no terminator yet) belongs to this answer
            more, tail = link.take_buffered()
            cut = [*answer.lines, *more] + ([RawLine(tail)] if tail else [])
            raw = "\n".join(handler.text(x.data) for x in cut)
            handler.line_no += len(cut)
            ending = req.end_line or (f"{req.lines} lines" if req.lines else "end of frame")
            await outbox.put([
                handler.reject(
                    raw,
                    f"answer to {query!r} incomplete: no {ending} before the line went quiet",
                    received_at,
                    handler.line_no,
                )
            ])
            st.last.pop(query, None)
            continue
        key = [x.data for x in answer.lines]
        if st.last.get(query) == key:
            continue  # the same last result again: nothing new
        st.last[query] = key
        items = handler.parse(answer.lines, received_at)
        await outbox.put([*st.gaps(items, received_at), *items])
        if spec.request_gap_s:
            await sleep_for(spec.request_gap_s)
    if answered and answered == len(spec.requests):
        health.polled(wire_s)  # a round with an unanswered request is an error
    return answered > 0


async def _stale_input(
    link: LineLink, handler: LineHandler, end_line: str | None, outbox: Outbox
) -> None:
    """Input that arrived between answers (a late answer, line noise) is parsed, not dropped."""
    lines, tail = await link.drain_input(0.0)
    if not lines and not tail:
        return
    received_at = utcnow()
    encoding = _spec(handler.target).encoding
    end = end_line.encode(encoding) if end_line is not None else None
    items: list[Item] = []
    chunk: list[RawLine] = []
    for raw in lines:
        if end is not None and raw.data.strip() == end:
            items += handler.parse(chunk, received_at)
            chunk = []
        else:
            chunk.append(raw)
    if tail:
        chunk.append(RawLine(tail))
    if chunk:
        handler.line_no += len(chunk)
        items.append(
            handler.reject(
                "\n".join(handler.text(x.data) for x in chunk),
                "unsolicited input between answers",
                received_at,
                handler.line_no,
            )
        )
    log.debug("%s: %d stale item(s) before a query", handler.target.station, len(items))
    await outbox.put(items)


async def _emit(outbox: Outbox, status: Item | None) -> None:
    if status is not None:
        await outbox.put([status])
