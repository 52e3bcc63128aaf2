"""The store-and-forward loop with a scripted in-memory client (the real servers are in
tests/integration): the cursor moves only over acknowledged batches; failures back off."""

from __future__ import annotations

import asyncio
import random
from collections.abc import Sequence
from pathlib import Path

import pytest

from gateway import metrics
from gateway.errors import ConfigError
from gateway.records import Record
from gateway.sinks.forwarder import (
    Backoff,
    ForwarderOptions,
    JournalForwarder,
    SinkUnavailable,
    read_secret,
)
from gateway.store.journal import KINDS, Kind, open_journal
from tests.integration.sinks_data import forwarding, shift, until

pytestmark = pytest.mark.timeout(30)
FAST = ForwarderOptions(batch_size=7, poll_interval_s=0.01, backoff_initial_s=0.01,
                        backoff_max_s=0.05, backlog_interval_s=0.01)


class Scripted:
    """Accepts batches unless told to fail; remembers what it acknowledged."""

    kinds: tuple[Kind, ...] = KINDS

    def __init__(self) -> None:
        self.down = False
        self.fail_sends = 0
        self.acked: list[str] = []
        self.connects = 0
        self.closed_gracefully = False

    def describe(self) -> str:
        return "scripted://test"

    async def connect(self) -> None:
        if self.down:
            raise SinkUnavailable("connection refused")
        self.connects += 1

    async def send(self, kind: Kind, rows: Sequence[tuple[int, Record]]) -> None:
        if self.down or self.fail_sends:
            self.fail_sends = max(0, self.fail_sends - 1)
            raise SinkUnavailable("lost the connection mid-batch")
        await asyncio.sleep(0)
        self.acked += [r.record_id for _, r in rows]

    async def close(self, *, graceful: bool) -> None:
        self.closed_gracefully = graceful


async def test_everything_once_in_order_per_kind(tmp_path: Path) -> None:
    j = open_journal(str(tmp_path / "j.db"))
    records = shift(1, 30)
    j.write(records)
    client = Scripted()
    fwd = JournalForwarder("t", client, FAST)
    async with forwarding(fwd, j):
        await until(lambda: len(client.acked) == len(records), 10, "all acknowledged")
    assert sorted(client.acked) == sorted(r.record_id for r in records)
    assert all(j.get_cursor("t", k) == j.max_seq(k) for k in KINDS)
    assert client.closed_gracefully
    j.close()


async def test_failed_batch_is_resent_and_cursor_waits(tmp_path: Path) -> None:
    j = open_journal(str(tmp_path / "j.db"))
    j.write(shift(1, 10))
    client = Scripted()
    client.fail_sends = 3
    fwd = JournalForwarder("t", client, FAST, rng=random.Random(1))
    async with forwarding(fwd, j):
        await until(lambda: fwd.failures >= 1, 10, "a failure")
        await until(lambda: sum(n for n, _ in j.backlog("t").values()) == 0, 10, "recovery")
    assert len(client.acked) == len(set(client.acked)) == len(shift(1, 10))
    assert client.connects >= 4  # reconnected after each failure
    assert fwd.failures == 0 and fwd.last_error == "lost the connection mid-batch"
    j.close()


async def test_down_sink_keeps_backlog_visible(tmp_path: Path) -> None:
    j = open_journal(str(tmp_path / "j.db"))
    records = shift(1, 10)
    j.write(records)
    client = Scripted()
    client.down = True
    fwd = JournalForwarder("down", client, FAST)
    async with forwarding(fwd, j):
        await until(lambda: fwd.failures >= 3, 10, "retries")
    assert fwd.backlog["result"][0] == 30 and fwd.backlog["result"][1] is not None
    text = metrics.exposition().decode()
    assert 'leakfleet_sink_backlog_records{kind="result",sink="down"} 30.0' in text
    assert 'leakfleet_sink_errors_total{sink="down"}' in text
    assert client.acked == []
    j.close()


def test_backoff_is_capped_with_jitter() -> None:
    b = Backoff(initial_s=0.5, cap_s=30.0, rng=random.Random(7))
    delays = [b.next_delay() for _ in range(20)]
    assert all(0 < d <= 30.0 for d in delays)
    assert max(delays[:3]) <= 2.0  # 0.5, 1, 2 ceilings
    assert len({round(d, 6) for d in delays[10:]}) > 5  # jittered, not a fixed cap
    assert min(delays[10:]) >= 3.0  # never below a tenth of the ceiling
    b.reset()
    assert b.next_delay() <= 0.5


def test_options_validated() -> None:
    assert ForwarderOptions.from_options({"batch_size": 10}).batch_size == 10
    with pytest.raises(ValueError, match="batch_size"):
        ForwarderOptions.from_options({"batch_size": 0})


def test_read_secret_env_first_then_file(tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    f = tmp_path / "secret"
    f.write_text("from-file\nignored\n")
    monkeypatch.delenv("LF_TEST_SECRET", raising=False)
    assert read_secret("LF_TEST_SECRET", str(f), "sink x") == "from-file"
    monkeypatch.setenv("LF_TEST_SECRET", "from-env")
    assert read_secret("LF_TEST_SECRET", str(f), "sink x") == "from-env"
    monkeypatch.delenv("LF_TEST_SECRET")
    assert read_secret("LF_TEST_SECRET", None, "sink x") is None
    with pytest.raises(ConfigError, match="cannot read secrets file") as e:
        read_secret("LF_TEST_SECRET", str(tmp_path / "missing"), "sink x")
    assert "from-file" not in str(e.value)


async def test_a_commit_wakes_the_forwarder_that_would_otherwise_sleep(tmp_path: Path) -> None:
    """With the writer's commit pulse the forwarder sends at once; its poll interval here is an
    hour, so reaching the sink at all proves the wake-up (no clock is read)."""
    from gateway.aio import Pulse

    j = open_journal(str(tmp_path / "j.db"))
    client = Scripted()
    fwd = JournalForwarder("w", client, ForwarderOptions(poll_interval_s=3600.0))
    fwd.wake = Pulse()
    records = shift(1, 3)
    async with forwarding(fwd, j):
        await until(lambda: fwd.connected, 10, "connected")
        await asyncio.sleep(0.05)  # let it reach its (hour-long) wait
        for rec in records:
            j.write([rec])
            fwd.wake.fire()
            await until(lambda rec=rec: rec.record_id in client.acked, 10, "woken by the commit")
    assert client.acked == [r.record_id for r in records]
    j.close()


async def test_pulse_fired_between_look_and_wait_is_not_missed() -> None:
    from gateway.aio import Pulse

    pulse = Pulse()
    token = pulse.token()  # taken before looking for work
    pulse.fire()  # the commit lands while we look
    await asyncio.wait_for(Pulse.wait(token, 3600.0), 10)  # returns at once, not in an hour
    stop = asyncio.Event()
    stop.set()
    await asyncio.wait_for(Pulse.wait(pulse.token(), 3600.0, stop), 10)


async def test_new_records_overtake_a_draining_backlog_and_the_cursor_stays_a_prefix(
    tmp_path: Path,
) -> None:
    """After an outage the backlog drains while new results go out first (a live lane); the
    cursor only ever covers acknowledged records, every record goes out once, statuses keep
    their order."""
    j = open_journal(str(tmp_path / "j.db"))
    backlog = shift(1, 40)  # 120 results: more than 4 batches of 7
    j.write(backlog)
    client = Scripted()
    cursors: list[tuple[int, int]] = []

    async def slow_send(kind: Kind, rows: Sequence[tuple[int, Record]]) -> None:
        await asyncio.sleep(0.01)
        if kind == "result":  # the cursor never passes a record not yet acknowledged
            cursors.append((j.get_cursor("lane", "result"), rows[0][0]))
        client.acked += [r.record_id for _, r in rows]

    client.send = slow_send  # type: ignore[method-assign]
    fwd = JournalForwarder("lane", client, FAST)
    live = shift(41, 43)
    async with forwarding(fwd, j):
        await until(lambda: len(client.acked) >= 14, 10, "the drain under way")
        j.write(live)
        await until(lambda: len(client.acked) == len(backlog) + len(live), 20, "all sent")
    order = {rid: i for i, rid in enumerate(client.acked)}
    newest_live = max(order[r.record_id] for r in live if r.kind == "result")
    last_backlog = max(order[r.record_id] for r in backlog if r.kind == "result")
    assert newest_live < last_backlog  # the new results did not wait for the whole backlog
    assert len(client.acked) == len(set(client.acked))
    assert cursors and all(cursor < first for cursor, first in cursors)
    statuses = [r.record_id for r in backlog + live if r.kind == "status"]
    assert [rid for rid in client.acked if rid in set(statuses)] == statuses
    assert all(j.get_cursor("lane", k) == j.max_seq(k) for k in KINDS)
    j.close()
