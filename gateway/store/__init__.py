"""Storage: the SQLite journal (write side, source of truth) and the query stores (read side).

Write side: ``open_journal(url) -> Journal``; the runtime writes batches, forwarders read forward
from per-sink cursors. Read side: ``open_store(url) -> QueryStore`` (see ``base``), which the
dashboard, ``leakfleet report`` and ``leakfleet export`` use; SQLite and InfluxDB implement it.
The query side (pandas) is imported lazily, so the gateway's writer does not pay for it.
"""

from __future__ import annotations

from typing import TYPE_CHECKING, Any

from gateway.store.journal import Journal, Kind, WriteStats, open_journal

if TYPE_CHECKING:
    from gateway.store.base import QueryStore, open_store, register_store
    from gateway.store.sqlite import SqliteStore

__all__ = [
    "Journal",
    "Kind",
    "QueryStore",
    "SqliteStore",
    "WriteStats",
    "open_journal",
    "open_store",
    "register_store",
]

_LAZY = {
    "QueryStore": "gateway.store.base",
    "open_store": "gateway.store.base",
    "register_store": "gateway.store.base",
    "SqliteStore": "gateway.store.sqlite",
}


def __getattr__(name: str) -> Any:
    if name in _LAZY:
        import importlib

        return getattr(importlib.import_module(_LAZY[name]), name)
    raise AttributeError(f"module 'gateway.store' has no attribute {name!r}")
