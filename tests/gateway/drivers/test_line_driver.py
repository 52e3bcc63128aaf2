"""Line framing and the serial drivers over a mock transport (byte-level request/answer pairs)."""

from __future__ import annotations

import asyncio
import dataclasses
from collections.abc import Callable, Sequence
from dataclasses import dataclass, field
from typing import Any

import pytest
from hypothesis import given
from hypothesis import strategies as st

from gateway.drivers.base import Item, Pacing, StationTarget
from gateway.drivers.lines import LineLink, LineSplitter, RawLine
from gateway.drivers.serial import LineHandler, read_answer, run_request_station
from gateway.profiles import StationContext, load_profile
from gateway.records import Rejected, StationState, StationStatus, TestResult

pytestmark = pytest.mark.timeout(10)


# -- splitter -------------------------------------------------------------------------------
def test_splits_on_terminator_and_tolerates_bare_lf() -> None:
    s = LineSplitter(b"\r\n", 100)
    assert s.feed(b"a;1\r\nb;2\nc") == [RawLine(b"a;1"), RawLine(b"b;2")]
    assert s.pending == b"c"
    assert s.feed(b";3\r\n") == [RawLine(b"c;3")]


def test_overlong_line_is_cut_reported_once_and_its_tail_skipped() -> None:
    s = LineSplitter(b"\r\n", 8)
    out = s.feed(b"0123456789abc")
    assert out == [RawLine(b"01234567", overlong=True)]
    assert s.feed(b"defgh" * 100) == []  # still the same line: buffered nothing
    assert s.feed(b"\r\nok\r\n") == [RawLine(b"ok")]


@given(st.binary(max_size=400), st.lists(st.integers(1, 50), max_size=30))
def test_chunking_never_changes_the_lines(data: bytes, cuts: list[int]) -> None:
    whole = LineSplitter(b"\r\n", 64).feed(data)
    s = LineSplitter(b"\r\n", 64)
    got: list[RawLine] = []
    pos = 0
    for n in cuts:
        got += s.feed(data[pos : pos + n])
        pos += n
    got += s.feed(data[pos:])
    assert got == whole
    assert all(len(line.data) <= 64 for line in got)


# -- a mock transport: a StreamReader fed by a scripted peer ----------------------------------
class ScriptedPeer:
    """Writer side of a LineLink: answers each query from a script (bytes in → bytes out)."""

    def __init__(self, reader: asyncio.StreamReader, script: Callable[[bytes], bytes]) -> None:
        self.reader = reader
        self.script = script
        self.sent: list[bytes] = []
        self.closed = False

    def write(self, data: bytes) -> None:
        self.sent.append(data)
        answer = self.script(data)
        if answer:
            asyncio.get_running_loop().call_soon(self.reader.feed_data, answer)

    async def drain(self) -> None:
        return None

    def close(self) -> None:
        self.closed = True

    async def wait_closed(self) -> None:
        return None


def mock_link(script: Callable[[bytes], bytes]) -> tuple[LineLink, ScriptedPeer]:
    reader = asyncio.StreamReader()
    peer = ScriptedPeer(reader, script)
    return LineLink(reader, peer, LineSplitter(b"\r\n", 256), "mock"), peer  # type: ignore[arg-type]


async def test_read_answer_to_end_line() -> None:
    link, _ = mock_link(lambda q: b"TYPE=RES\r\nCYC=1\r\nEND\r\n" if q == b"?LAST\r" else b"")
    await link.write(b"?LAST\r", 1)
    answer = await read_answer(link, "END", None, timeout=1, gap=0.2)
    assert answer.complete and [x.data for x in answer.lines] == [b"TYPE=RES", b"CYC=1"]


async def test_cut_off_answer_ends_at_the_silence_gap() -> None:
    link, _ = mock_link(lambda q: b"TYPE=RES\r\nCYC=1\r\n")
    await link.write(b"?LAST\r", 1)
    answer = await read_answer(link, "END", None, timeout=5, gap=0.05)
    assert not answer.complete and len(answer.lines) == 2


async def test_no_answer_is_empty_and_incomplete() -> None:
    link, _ = mock_link(lambda q: b"")
    await link.write(b"?LAST\r", 1)
    answer = await read_answer(link, "END", None, timeout=0.05, gap=0.05)
    assert answer.lines == [] and not answer.complete


# -- request/response station over the mock transport ------------------------------------------
def kv_answer(cycle: int) -> bytes:
    """An lf-kv ?LAST answer as sim/README.md documents it."""
    lines = [
        "TYPE=RES", f"CYC={cycle}", "TS=2026-12-02T06:15:09Z", "PRG=MV-44", "SN=MV44-000123",
        "VRD=GOOD", "PU=psi", "LU=sccm", "P=20.003", "DP=0.01040", "LR=0.512", "LIM=3.500",
        "LLIM=", "TF=2.5", "TST=6.0", "TT=8.0", "TMP=21.7", "END",
    ]  # fmt: skip
    return b"".join(line.encode() + b"\r\n" for line in lines)


NONE = b"NONE\r\nEND\r\n"


def kv_profile(timeout_s: float = 0.2) -> Any:
    """The built-in lf-kv profile, asking only ?LAST (the tests script one query)."""
    profile = load_profile("lf-kv")
    assert profile.serial is not None
    requests = [dataclasses.replace(profile.serial.requests[0], timeout_s=timeout_s)]
    return dataclasses.replace(profile, serial=dataclasses.replace(profile.serial,
                                                                   requests=requests))


@dataclass
class Collect:
    items: list[Item] = field(default_factory=list)
    accepting: bool = True

    async def put(self, items: Sequence[Item]) -> None:
        self.items.extend(items)


def target(timeout_s: float = 0.2) -> StationTarget:
    return StationTarget(
        station="K1", endpoint="mock", profile=kv_profile(timeout_s),
        context=StationContext(station="K1", line="L1"), poll_interval_s=0.01, timeout_s=0.2,
    )


async def run_for(t: StationTarget, peer_script: Callable[[bytes], bytes], until: Callable[
        [Collect], bool], pacing: Pacing | None = None) -> tuple[Collect, list[ScriptedPeer]]:
    out = Collect()
    peers: list[ScriptedPeer] = []

    async def opener(_: StationTarget) -> LineLink:
        link, peer = mock_link(peer_script)
        peers.append(peer)
        return link

    task = asyncio.create_task(
        run_request_station(t, out, pacing or Pacing(backoff_initial_s=0.01, backoff_max_s=0.02,
                                                     offline_after=2, line_gap_s=0.03),
                            opener=opener)
    )
    try:
        for _ in range(400):
            if until(out):
                break
            await asyncio.sleep(0.01)
    finally:
        task.cancel()
        with pytest.raises(asyncio.CancelledError):
            await task
    return out, peers


def cycles(items: list[Item]) -> list[int]:
    return [i.cycle for i in items if isinstance(i, TestResult)]


async def test_repeated_last_answer_is_stored_once() -> None:
    answers = iter([NONE] + [kv_answer(1)] * 5 + [kv_answer(2)] * 50)
    out, peers = await run_for(target(), lambda q: next(answers), lambda c: 2 in cycles(c.items))
    assert cycles(out.items) == [1, 2]
    assert peers[0].sent[0] == b"?LAST\r"  # the query exactly as the profile gives it
    statuses = [i for i in out.items if isinstance(i, StationStatus)]
    assert [s.state for s in statuses] == [StationState.ONLINE]


async def test_noise_before_an_answer_is_quarantined_and_the_result_still_read() -> None:
    answers = iter([b"\xfe\x81junk\r\n" + kv_answer(7)] + [kv_answer(7)] * 50)
    out, _ = await run_for(target(), lambda q: next(answers), lambda c: 7 in cycles(c.items))
    rejected = [i for i in out.items if isinstance(i, Rejected)]
    assert len(rejected) == 1 and "\\xfe\\x81junk" in rejected[0].raw  # exact bytes kept
    assert cycles(out.items) == [7]


async def test_truncated_answer_is_quarantined_and_the_next_one_read() -> None:
    answers = iter([kv_answer(3)[:60]] + [kv_answer(3)] * 50)
    out, _ = await run_for(target(), lambda q: next(answers), lambda c: 3 in cycles(c.items))
    rejected = [i for i in out.items if isinstance(i, Rejected)]
    assert len(rejected) == 1 and "incomplete" in rejected[0].reason


async def test_silent_station_goes_offline_once_then_recovers() -> None:
    state = {"n": 0}

    def script(q: bytes) -> bytes:
        state["n"] += 1
        return b"" if state["n"] <= 6 else kv_answer(9)

    t = target(timeout_s=0.02)
    out, _ = await run_for(t, script, lambda c: 9 in cycles(c.items))
    states = [i.state for i in out.items if isinstance(i, StationStatus)]
    assert states == [StationState.OFFLINE, StationState.ONLINE]
    assert t.health.last_success is not None and t.health.last_error


async def test_late_answer_is_parsed_before_the_next_query() -> None:
    calls = {"n": 0}

    def script(q: bytes) -> bytes:
        calls["n"] += 1
        return b"" if calls["n"] == 1 else kv_answer(4)

    link, _ = mock_link(script)
    handler = LineHandler(target())
    out = Collect()
    from gateway.drivers.serial import _stale_input

    await link.write(b"?LAST\r", 1)
    link._reader.feed_data(kv_answer(5) + b"TYPE=RES\r\nCY")  # a late answer and a cut one
    await _stale_input(link, handler, "END", out)
    assert cycles(out.items) == [5]
    assert [i.reason for i in out.items if isinstance(i, Rejected)] == [
        "unsolicited input between answers"
    ]


async def test_a_link_that_drops_at_once_does_not_flood_statuses() -> None:
    """A device server that accepts and resets: the link never counts as up, so there is no
    'online' status and the backoff keeps growing (no online/offline flood)."""
    from gateway.drivers.base import TransportError
    from gateway.drivers.serial import run_stream_station

    opened: list[float] = []

    class Dropping:
        async def read_line(self, timeout: float) -> Any:
            raise TransportError("mock: connection reset by peer")

        async def close(self) -> None:
            return None

    async def opener(_: StationTarget) -> Any:
        opened.append(asyncio.get_running_loop().time())
        return Dropping()

    profile = load_profile("lf-delim")
    t = StationTarget(station="D1", endpoint="mock", profile=profile,
                      context=StationContext(station="D1", line="L1"), poll_interval_s=1.0,
                      timeout_s=1.0)
    out = Collect()
    task = asyncio.create_task(run_stream_station(
        t, out, Pacing(backoff_initial_s=0.01, backoff_max_s=0.32, offline_after=1,
                       line_gap_s=0.03), opener=opener))
    await asyncio.sleep(0.8)
    task.cancel()
    with pytest.raises(asyncio.CancelledError):
        await task
    states = [i.state for i in out.items if isinstance(i, StationStatus)]
    assert StationState.ONLINE not in states
    # growing backoff: 0.8 s holds a handful of attempts, not hundreds
    assert 3 <= len(opened) <= 12, len(opened)


async def test_a_read_error_between_requests_is_a_link_failure() -> None:
    """OSError while draining stale input (an unplugged USB adapter) ends the link with a
    status, it does not crash the bus task."""
    from gateway.drivers.base import TransportError

    reader = asyncio.StreamReader()
    reader.set_exception(OSError(5, "Input/output error"))
    link = LineLink(reader, ScriptedPeer(reader, lambda q: b""), LineSplitter(b"\r\n", 256),
                    "mock")  # type: ignore[arg-type]
    with pytest.raises(TransportError, match="read failed"):
        await link.drain_input(0.0)


def test_an_overlong_line_inside_an_answer_loses_only_itself() -> None:
    from datetime import UTC, datetime

    from gateway.drivers.serial import LineHandler

    handler = LineHandler(target())
    lines = [RawLine(x) for x in kv_answer(7).split(b"\r\n") if x and x != b"END"]
    lines.insert(3, RawLine(b"NOTE=" + b"x" * 300, overlong=True))
    items = handler.parse(lines, datetime(2026, 12, 2, 7, tzinfo=UTC))
    rejected = [i for i in items if isinstance(i, Rejected)]
    assert len(rejected) == 1 and "line longer than" in rejected[0].reason
    assert cycles(items) == [7]  # the answer itself is kept
