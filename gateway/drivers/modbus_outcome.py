"""What the Modbus readers share: the transport seam they read through, and what one poll
brought (the ring reader, the last-result reader and the curve reader)."""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Protocol

from gateway.drivers.base import Item
from gateway.records import StationState

__all__ = ["PollOutcome", "RegisterLink"]


class RegisterLink(Protocol):
    """The transport seam: read ``count`` registers with function 3 or 4."""

    async def read(self, function: int, address: int, count: int, device_id: int) -> list[int]:
        """Registers as read; ``ExceptionReply``, ``NoAnswer`` or ``LinkLost`` otherwise."""

    async def write(self, address: int, values: list[int], device_id: int) -> None:
        """Write holding registers: used only for a profile's acknowledge register."""


@dataclass
class PollOutcome:
    """What one poll brought: items to journal plus numbers for health and tests."""

    items: list[Item] = field(default_factory=list)
    state: StationState | None = None
    counter: int = 0
    accepted: int = 0
    torn: int = 0
    missed: int = 0
    unread: int = 0  # slots whose read failed this poll (read again at the next)
