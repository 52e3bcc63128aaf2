"""The gateway as its own process (``python -m gateway gateway --config FILE``), for fault tests."""

from __future__ import annotations

import asyncio
import os
import signal
import sys
from pathlib import Path

REPO = Path(__file__).resolve().parents[2]


class Gateway:
    """One gateway process; stderr (its log) goes to ``log`` (appended across restarts)."""

    def __init__(self, config: Path, log: Path, *extra: str) -> None:
        self.config, self.log, self.extra = config, log, extra
        self.proc: asyncio.subprocess.Process | None = None

    async def start(self) -> None:
        with self.log.open("ab") as err:
            self.proc = await asyncio.create_subprocess_exec(
                sys.executable, "-m", "gateway", "gateway", "--config", str(self.config),
                *self.extra, cwd=REPO, stdout=asyncio.subprocess.DEVNULL, stderr=err,
                env={**os.environ, "PYTHONPATH": str(REPO)},
            )  # fmt: skip

    def text(self) -> str:
        return self.log.read_text(errors="replace") if self.log.exists() else ""

    async def wait_for_text(self, needle: str, count: int = 1, timeout: float = 30.0) -> None:
        async with asyncio.timeout(timeout):
            while self.text().count(needle) < count:
                if self.proc is not None and self.proc.returncode is not None:
                    raise AssertionError(f"gateway exited early:\n{self.text()[-3000:]}")
                await asyncio.sleep(0.05)

    async def stop(self, sig: int = signal.SIGTERM, timeout: float = 30.0) -> int:
        assert self.proc is not None
        if self.proc.returncode is None:
            self.proc.send_signal(sig)
        return await asyncio.wait_for(self.proc.wait(), timeout)

    async def ensure_dead(self) -> None:
        if self.proc is not None and self.proc.returncode is None:
            self.proc.kill()
            await self.proc.wait()


def rss_kb(pid: int) -> int:
    with open(f"/proc/{pid}/status") as fh:
        for line in fh:
            if line.startswith("VmRSS:"):
                return int(line.split()[1])
    return 0
