"""One exception family so callers can catch leakfleet failures without catching bugs."""

from __future__ import annotations

__all__ = [
    "ConfigError",
    "DecodeError",
    "LeakfleetError",
    "ProtocolError",
    "StoreError",
    "TransportError",
    "UnitError",
]


class LeakfleetError(Exception):
    """Base of every error leakfleet raises on purpose."""


class ConfigError(LeakfleetError):
    """A configuration, profile or scenario file is invalid."""


class UnitError(LeakfleetError, ValueError):
    """A quantity or unit string cannot be understood."""


class TransportError(LeakfleetError):
    """A serial line, socket or Modbus link failed or timed out."""


class ProtocolError(LeakfleetError):
    """A station answered, but not in the way its profile says it should."""


class DecodeError(LeakfleetError, ValueError):
    """Raw bytes, registers or fields cannot be turned into a record."""


class StoreError(LeakfleetError):
    """The journal or a store could not be read or written."""
