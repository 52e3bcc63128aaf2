"""Small asyncio helpers shared by drivers and the runtime."""

from __future__ import annotations

import asyncio
from collections.abc import Awaitable
from typing import TypeVar

T = TypeVar("T")

__all__ = ["within"]


async def within(aw: Awaitable[T], timeout: float) -> T:
    """Await ``aw`` for at most ``timeout`` seconds (TimeoutError otherwise).

    Used instead of ``asyncio.wait_for``, which on Python 3.11 can swallow a cancellation that
    arrives as the inner await completes and so keep a stopping task alive; ``asyncio.timeout``
    does not.
    """
    async with asyncio.timeout(timeout):
        return await aw
