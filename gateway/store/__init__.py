"""Storage: the SQLite journal (write side, source of truth) and the query stores (read side).

Write side: ``open_journal(url) -> Journal``; the runtime writes batches, forwarders read forward
from per-sink cursors. Read side: ``open_store(url) -> QueryStore`` (see ``base``), which the
dashboard, ``leakfleet report`` and ``leakfleet export`` use; SQLite and InfluxDB implement it.
"""

from gateway.store.journal import Journal, Kind, WriteStats, open_journal

__all__ = ["Journal", "Kind", "WriteStats", "open_journal"]
