"""``leakfleet demo --mqtt``: the demo plant's results reach a real, password-protected Mosquitto.

The demo runs as a user runs it (a child process, headless); the password comes from the
environment only and must appear in none of its output, even at debug level.
"""

from __future__ import annotations

import asyncio
import json
import os
import signal
import sqlite3
import sys
from collections.abc import Iterator
from pathlib import Path

import pytest

from gateway.sinks.mqtt import PASSWORD_ENV
from tests.support.servers import MosquittoServer, MqttLog

pytestmark = [pytest.mark.integration, pytest.mark.timeout(120)]

REPO = Path(__file__).resolve().parents[2]
SECRET = "Nw-demo-4c1e-quiet-kettle"
STATIONS = {"L1-S1", "L1-S2", "L1-S3", "L2-S1", "L2-S2", "L2-S3"}


@pytest.fixture(scope="module")
def broker(tmp_path_factory: pytest.TempPathFactory) -> Iterator[MosquittoServer]:
    users = {"demo": SECRET, "reader": "reader-pass"}
    with MosquittoServer(tmp_path_factory.mktemp("demo-broker"), users=users) as server:
        yield server


def _results(messages: list[tuple[str, bytes, bool]]) -> dict[str, dict[str, object]]:
    out: dict[str, dict[str, object]] = {}
    for topic, payload, _ in messages:
        if topic.endswith("/result"):
            doc = json.loads(payload)
            out[str(doc["record_id"])] = doc
    return out


async def test_demo_forwards_results_to_mosquitto(broker: MosquittoServer, tmp_path: Path) -> None:
    run = tmp_path / "run"
    env = {**os.environ, PASSWORD_ENV: SECRET}
    url = f"mqtt://demo@127.0.0.1:{broker.port}"
    async with MqttLog(broker, "leakfleet/#", client_id="demo-reader", username="reader",
                       password="reader-pass") as sub:  # fmt: skip
        proc = await asyncio.create_subprocess_exec(
            sys.executable, "-m", "gateway", "demo", "--no-dashboard", "--free-ports",
            "--seconds", "90", "--run-dir", str(run), "--mqtt", url, "--log-level", "debug",
            cwd=REPO, env=env, stdout=asyncio.subprocess.PIPE, stderr=asyncio.subprocess.PIPE,
        )  # fmt: skip
        out_task = asyncio.ensure_future(proc.communicate())
        try:
            # stop the demo (as Ctrl-C would) once every station has reported a few results
            def enough(m: list[tuple[str, bytes, bool]]) -> bool:
                per = [str(r["station"]) for r in _results(m).values()]
                return all(per.count(s) >= 2 for s in STATIONS)

            waiter = asyncio.ensure_future(sub.wait_for(enough, timeout=80))
            await asyncio.wait([waiter, out_task], return_when=asyncio.FIRST_COMPLETED)
            assert not out_task.done(), "the demo ended before results reached the broker"
            await waiter
        finally:
            if proc.returncode is None:
                proc.send_signal(signal.SIGINT)
            stdout_b, stderr_b = await asyncio.wait_for(out_task, 60)
        # the gateway announces itself offline on a clean stop (retained state topic)
        await sub.wait_for(
            lambda m: any(t.endswith("/gateway/nw-gw-1/state") and p == b"offline"
                          for t, p, _ in m), timeout=15)  # fmt: skip
    stdout, stderr = stdout_b.decode(), stderr_b.decode()
    assert proc.returncode == 0, stderr[-2000:]
    assert "Traceback" not in stderr, stderr[stderr.find("Traceback") - 300 :][:3000]
    assert "forwarding to sink mqtt" in stdout
    assert SECRET not in stdout and SECRET not in stderr

    got = _results(sub.messages)
    topics = {t for t, _, _ in sub.messages if t.endswith("/result")}
    assert "leakfleet/northmere-works/l1/l1-s1/result" in topics
    with sqlite3.connect(run / "demo.db") as conn:
        journal = {r[0]: r[1] for r in conn.execute("SELECT record_id, station FROM results")}
    # what the broker delivered is what the journal holds, record for record
    assert set(got) <= set(journal)
    assert all(journal[rid] == doc["station"] for rid, doc in got.items())
    assert {str(doc["station"]) for doc in got.values()} == STATIONS
