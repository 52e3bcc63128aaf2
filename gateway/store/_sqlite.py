"""Small SQLite helpers shared by the journal (write side) and SqliteStore (query side)."""

from __future__ import annotations

import sqlite3
from datetime import UTC, datetime, timedelta
from pathlib import Path

from gateway.errors import ConfigError, StoreError

__all__ = ["ACCEPTED_URLS", "EPOCH", "from_us", "sqlite_path", "store_error", "to_us"]

EPOCH = datetime(1970, 1, 1, tzinfo=UTC)

ACCEPTED_URLS = (
    "sqlite:///path/file.db (or a bare path), influxdb://host:port/database, "
    "influxdb2://host:port?org=..&bucket=.."
)


def to_us(value: datetime) -> int:
    """Exact integer microseconds since the epoch (a float timestamp would round)."""
    d = value - EPOCH  # the timedelta's fields: cheaper than dividing by a timedelta
    return (d.days * 86_400 + d.seconds) * 1_000_000 + d.microseconds


def from_us(value: int) -> datetime:
    return EPOCH + timedelta(microseconds=value)


def sqlite_path(url: str) -> Path:
    """``sqlite:///rel/file.db``, ``sqlite:////abs/file.db`` or a bare path → Path."""
    if "://" not in url:
        if not url.strip():
            raise ConfigError(f"empty store URL; expected one of: {ACCEPTED_URLS}")
        return Path(url)
    scheme, _, rest = url.partition("://")
    if scheme.lower() != "sqlite" or not rest.startswith("/") or rest == "/":
        raise ConfigError(f"store URL {url!r} is not a SQLite URL; expected sqlite:///path/file.db")
    path = rest[1:]
    if "?" in path:
        raise ConfigError(f"store URL {url!r}: query parameters are not supported for SQLite")
    return Path(path)


_REASONS = {
    "SQLITE_FULL": "disk full (or journal size limit reached)",
    "SQLITE_READONLY": "journal is read-only",
    "SQLITE_BUSY": "journal is locked by another process",
    "SQLITE_LOCKED": "journal is locked",
    "SQLITE_CANTOPEN": "cannot open the journal file",
    "SQLITE_IOERR": "I/O error",
    "SQLITE_CORRUPT": "journal file is corrupt",
    "SQLITE_NOTADB": "file is not a SQLite database",
    "SQLITE_PERM": "permission denied",
}


def store_error(exc: sqlite3.Error, path: Path | str, action: str) -> StoreError:
    """Translate a sqlite3 error into one readable StoreError line (caller does ``raise from``)."""
    name = getattr(exc, "sqlite_errorname", "") or ""
    base = name.split("_")[0:2]
    reason = _REASONS.get(name) or _REASONS.get("_".join(base)) or type(exc).__name__
    return StoreError(f"journal {path}: {reason} while {action} ({exc})")
