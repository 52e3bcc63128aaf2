"""What one Modbus poll brought, shared by the ring reader and the last-result reader."""

from __future__ import annotations

from dataclasses import dataclass, field

from gateway.drivers.base import Item
from gateway.records import StationState

__all__ = ["PollOutcome"]


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
