"""A station whose clock jumps back an hour (daylight saving, a battery swap).

A real TCP peer plays an lf-delim station (sim/README.md wire format) whose clock is set back
one hour after cycle 20: cycles keep counting, the times repeat an hour already reported, and
one result even ends at exactly the same second as an earlier one. Every result must be stored
once, with the time the station reported (its clock is the record's truth), the jump must be
flagged in a status, and the repeated time must not trip the unique key (station, cycle, end).
"""

from __future__ import annotations

import asyncio
import contextlib
import sqlite3
from datetime import datetime, timedelta
from pathlib import Path

import pytest

from tests.faults.gw import Gateway

pytestmark = [pytest.mark.integration, pytest.mark.timeout(60)]
T0 = datetime(2026, 10, 25, 0, 30, 0)  # station local time (UTC here)


def _line(cycle: int, ended: datetime) -> bytes:
    return (f"R;{cycle};{ended:%Y-%m-%d %H:%M:%S};HX-210;HX210-{cycle:06d};ACC;350.02;41.8;"
            f"0.213;2.000;-1.000;3.0;8.0;10.0;22.41\r\n").encode()  # fmt: skip


def _times() -> list[tuple[int, datetime]]:
    out = []
    for cycle in range(1, 41):
        ended = T0 + timedelta(minutes=3 * cycle)
        if cycle > 20:
            ended -= timedelta(hours=1)  # the clock was set back an hour after cycle 20
        out.append((cycle, ended))
    return out


async def test_clock_set_back_an_hour(tmp_path: Path) -> None:
    times = _times()
    ended = [e for _, e in times]
    assert len(set(ended)) < len(ended)  # some end times really repeat (cycles 1..20 vs 21..40)
    connected = asyncio.Event()

    async def station(reader: asyncio.StreamReader, writer: asyncio.StreamWriter) -> None:
        connected.set()
        for cycle, end in times:
            writer.write(_line(cycle, end))
            await writer.drain()
            await asyncio.sleep(0.02)
        with contextlib.suppress(ConnectionError):
            await reader.read()  # keep the line open until the gateway goes

    server = await asyncio.start_server(station, "127.0.0.1", 0)
    port = server.sockets[0].getsockname()[1]
    db = tmp_path / "journal.db"
    cfg = tmp_path / "gateway.toml"
    cfg.write_text(
        f'site = "Northmere Works"\ntimezone = "UTC"\nstore = "sqlite:///{db}"\n'
        f'[[stations]]\nid = "L1-S1"\nline = "L1"\nprofile = "lf-delim"\n'
        f'endpoint = "tcp://127.0.0.1:{port}"\n'
    )
    gw = Gateway(cfg, tmp_path / "gateway.log")
    try:
        await gw.start()
        await asyncio.wait_for(connected.wait(), 30)
        async with asyncio.timeout(30):
            while True:
                if db.exists():
                    with contextlib.closing(sqlite3.connect(db)) as conn:
                        n = conn.execute("SELECT COUNT(*) FROM results").fetchone()[0]
                    if n >= len(times):
                        break
                await asyncio.sleep(0.1)
        assert await gw.stop() == 0
    finally:
        await gw.ensure_dead()
        server.close()
        await server.wait_closed()

    with contextlib.closing(sqlite3.connect(db)) as conn:
        rows = conn.execute("SELECT cycle, ended_at FROM results ORDER BY cycle").fetchall()
        details = [d for (d,) in conn.execute("SELECT detail FROM statuses")]
        quarantined = conn.execute("SELECT COUNT(*) FROM quarantine").fetchone()[0]
    epoch = datetime(1970, 1, 1)
    stored = [(c, epoch + timedelta(microseconds=us)) for c, us in rows]
    assert stored == times  # all 40, once each, at the times the station reported
    assert quarantined == 0
    flagged = [d for d in details if "clock" in d.lower()]
    assert len(flagged) == 1, details  # the jump is flagged once
    assert "cycle 21" in flagged[0] and "57 min" in flagged[0], flagged  # 3 min on, 60 back
