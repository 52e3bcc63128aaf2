"""Small asyncio helpers shared by drivers and the runtime."""

from __future__ import annotations

import asyncio
import contextlib
from collections.abc import Awaitable
from typing import TypeVar

T = TypeVar("T")

__all__ = ["Pulse", "within"]


async def within(aw: Awaitable[T], timeout: float) -> T:
    """Await ``aw`` for at most ``timeout`` seconds (TimeoutError otherwise).

    Used instead of ``asyncio.wait_for``, which on Python 3.11 can swallow a cancellation that
    arrives as the inner await completes and so keep a stopping task alive; ``asyncio.timeout``
    does not.
    """
    async with asyncio.timeout(timeout):
        return await aw


class Pulse:
    """A broadcast "new data" signal: one ``fire`` wakes every task waiting at that moment.

    A waiter takes a ``token()`` *before* it looks for work and then waits on that token, so a
    fire that happens between looking and waiting is not missed (an ``asyncio.Event`` that is
    cleared after each wake-up would lose it, or wake one waiter and not another).
    """

    def __init__(self) -> None:
        self._event = asyncio.Event()

    def token(self) -> asyncio.Event:
        return self._event

    def fire(self) -> None:
        self._event.set()
        self._event = asyncio.Event()

    @staticmethod
    async def wait(token: asyncio.Event, timeout: float, *also: asyncio.Event) -> None:
        """Until ``token`` or any event in ``also`` is set, or ``timeout`` s have passed."""
        events = (token, *also)
        if any(e.is_set() for e in events):
            return
        waiters = [asyncio.ensure_future(e.wait()) for e in events]
        try:
            with contextlib.suppress(TimeoutError):
                async with asyncio.timeout(timeout):
                    await asyncio.wait(waiters, return_when=asyncio.FIRST_COMPLETED)
        finally:
            for w in waiters:
                w.cancel()
