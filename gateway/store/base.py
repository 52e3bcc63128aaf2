"""The query seam: one small read interface over any store, and the URL → store registry.

The dashboard, ``leakfleet report`` and ``leakfleet export`` only ever see ``QueryStore``. It
hides where the data lives (the SQLite journal, InfluxDB) and pushes every aggregation into the
store (SQL / InfluxQL), so a page on ten million results moves only the aggregated rows.

Conventions every implementation keeps:

- Time ranges are half-open ``[since, until)`` on ``ended_at`` (``at`` for statuses,
  ``received_at`` for quarantine); ``None`` means unbounded. Arguments must be tz-aware.
- Frames carry the canonical record field names (gateway.records) as columns; timestamps are
  tz-aware UTC (``datetime64[..., UTC]``); an empty result is an empty frame with the same
  columns, never an error.
- Missing values (an absent part_id, temperature) are pandas' NA, whatever its dtype.
- Filters (``station``, ``line``, ``program``) choose which rows take part at all.
- ``by`` names grouping columns from ``GROUP_COLUMNS``; anything else is a ValueError.
- Buckets (``"hour"``, ``"day"``) are UTC and named ``bucket`` (the bucket's start). For a
  plant-local day or shift, ask for hours and roll them up in the caller's time zone.
"""

from __future__ import annotations

import importlib
from collections.abc import Callable, Sequence
from datetime import datetime
from typing import Literal, Protocol, runtime_checkable

import pandas as pd

from gateway.errors import ConfigError
from gateway.store._sqlite import ACCEPTED_URLS

__all__ = [
    "ACCEPTED_URLS",
    "GROUP_COLUMNS",
    "HISTOGRAM_VALUES",
    "VERDICT_GROUP_COLUMNS",
    "Bucket",
    "GroupColumn",
    "QueryStore",
    "VerdictGroupColumn",
    "open_store",
    "register_store",
]

Bucket = Literal["hour", "day"]
GroupColumn = Literal["station", "line", "program"]
#: verdict_counts may also group by the reject reason the station reported ("" when none)
VerdictGroupColumn = Literal["station", "line", "program", "reason"]
#: the only column names a caller may group by
GROUP_COLUMNS: tuple[str, ...] = ("station", "line", "program")
VERDICT_GROUP_COLUMNS: tuple[str, ...] = (*GROUP_COLUMNS, "reason")
#: the only result columns a histogram may bin
HISTOGRAM_VALUES: tuple[str, ...] = ("leak_rate_sccm", "pressure_loss_pa", "test_pressure_pa")


@runtime_checkable
class QueryStore(Protocol):
    """Read-only access to stored records; see the module docstring for shared conventions."""

    def stations(self) -> pd.DataFrame:
        """Every station seen: ``station``, ``line`` (from its latest record, or None)."""
        ...

    def results(
        self,
        since: datetime | None = None,
        until: datetime | None = None,
        *,
        station: str | None = None,
        line: str | None = None,
        program: str | None = None,
        part_id: str | None = None,
        limit: int | None = None,
        newest_first: bool = False,
    ) -> pd.DataFrame:
        """Result rows (every TestResult field, plus ``seq``, ``record_id``), by ``ended_at``."""
        ...

    def calibrations(
        self,
        since: datetime | None = None,
        until: datetime | None = None,
        *,
        station: str | None = None,
        line: str | None = None,
        program: str | None = None,
        limit: int | None = None,
        newest_first: bool = False,
    ) -> pd.DataFrame:
        """Calibration rows (every CalibrationEvent field, plus ``seq``, ``record_id``)."""
        ...

    def statuses(
        self,
        since: datetime | None = None,
        until: datetime | None = None,
        *,
        station: str | None = None,
        limit: int | None = None,
        newest_first: bool = False,
    ) -> pd.DataFrame:
        """State changes: ``seq``, ``record_id``, ``station``, ``at``, ``state``, ``detail``."""
        ...

    def quarantine(
        self,
        since: datetime | None = None,
        until: datetime | None = None,
        *,
        station: str | None = None,
        limit: int | None = None,
        newest_first: bool = False,
    ) -> pd.DataFrame:
        """Rejected input: ``seq``, ``station``, ``profile``, ``raw``, ``reason``,
        ``received_at``, ``line_no``."""
        ...

    def latest_results_per_station(self) -> pd.DataFrame:
        """Each station's most recent result (same columns as ``results``)."""
        ...

    def latest_status_per_station(self) -> pd.DataFrame:
        """Each station's most recent state change (same columns as ``statuses``)."""
        ...

    def latest_calibration_per_station(self) -> pd.DataFrame:
        """Each station's most recent calibration (same columns as ``calibrations``); a station
        that never calibrated has no row."""
        ...

    def verdict_counts(
        self,
        since: datetime | None = None,
        until: datetime | None = None,
        *,
        by: Sequence[VerdictGroupColumn] = ("station",),
        bucket: Bucket | None = None,
        station: str | None = None,
        line: str | None = None,
        program: str | None = None,
    ) -> pd.DataFrame:
        """Tests per group and verdict: ``*by``, [``bucket``], ``verdict``, ``n``.

        ``by`` may include ``reason`` (the reject reason as the station reported it, ``""``
        when it gave none), so a Pareto of rejects by reason needs no result rows.
        """
        ...

    def first_pass_counts(
        self,
        since: datetime | None = None,
        until: datetime | None = None,
        *,
        by: Sequence[GroupColumn] = ("station",),
        bucket: Bucket | None = None,
        station: str | None = None,
        line: str | None = None,
        program: str | None = None,
    ) -> pd.DataFrame:
        """Parts (results with a part_id), each judged by all of its tests.

        A part's first test ever decides it (first-pass yield, common practice) and places
        it: the part belongs to the group and bucket of that test, and the range and filters
        pick parts by it (``station="X"``: the parts first tested at X; a retest at X of a
        part first tested elsewhere, or earlier, is not a first pass at X). So the groups
        add up: the ``by=("station",)`` row for X equals ``station="X"``. Columns: ``*by``,
        [``bucket``], ``parts``, ``first_pass`` (first test passed), ``final_pass`` (the
        part's last test passed, wherever and whenever it ran), ``tests`` (all tests of those
        parts), ``no_part_id`` (results in range and filters that carry no part id and so
        cannot count as parts, by their own group).
        """
        ...

    def histogram(
        self,
        since: datetime | None,
        until: datetime | None,
        edges: Sequence[float],
        *,
        station: str | None = None,
        line: str | None = None,
        program: str | None = None,
        value: str = "leak_rate_sccm",
    ) -> pd.DataFrame:
        """Counts of ``value`` per bin: ``bin_lo``, ``bin_hi``, ``n``.

        Bins follow numpy.histogram: ``[lo, hi)``, the last bin closed. The first row holds
        the values below ``edges[0]`` (``bin_lo`` = -inf) and the last the values above
        ``edges[-1]`` (``bin_hi`` = +inf), so no reading is silently out of the picture.
        """
        ...

    def leak_summary(
        self,
        since: datetime | None = None,
        until: datetime | None = None,
        *,
        by: Sequence[GroupColumn] = ("station",),
        bucket: Bucket | None = None,
        station: str | None = None,
        line: str | None = None,
        program: str | None = None,
    ) -> pd.DataFrame:
        """``leak_rate_sccm`` statistics: ``*by``, [``bucket``], ``n``, ``mean``, ``std``
        (sample, ddof=1; NaN for n < 2), ``min``, ``max``."""
        ...

    def calibration_series(
        self,
        station: str,
        program: str | None = None,
        since: datetime | None = None,
        until: datetime | None = None,
    ) -> pd.DataFrame:
        """One station's calibrations in time order, for drift charts: ``ended_at``,
        ``program``, ``master_loss_pa``, ``standard_loss_pa``, ``standard_sccm``, ``ratio``,
        ``sensitivity``, ``passed``, ``reason``."""
        ...

    def close(self) -> None:
        """Release connections; the store is unusable afterwards."""
        ...


StoreFactory = Callable[[str], QueryStore]
_REGISTRY: dict[str, StoreFactory | str] = {
    "sqlite": "gateway.store.sqlite:open_sqlite_store",
    # provided by gateway/store/influx.py (InfluxDB v1 HTTP API / v2 token API)
    "influxdb": "gateway.store.influx:open_influx_store",
    "influxdb2": "gateway.store.influx:open_influx_store",
}


def register_store(scheme: str, factory: StoreFactory | str) -> None:
    """Map a URL scheme to a factory (or a lazy ``"module:function"`` reference)."""
    _REGISTRY[scheme.lower()] = factory


def _resolve(scheme: str, url: str) -> StoreFactory:
    entry = _REGISTRY[scheme]
    if not isinstance(entry, str):
        return entry
    module_name, _, attr = entry.partition(":")
    try:
        module = importlib.import_module(module_name)
    except ModuleNotFoundError as exc:
        if exc.name != module_name:
            raise
        raise ConfigError(
            f"store URL {url!r}: {scheme} stores are not available in this build"
        ) from exc
    factory: StoreFactory = getattr(module, attr)
    _REGISTRY[scheme] = factory
    return factory


def open_store(url: str) -> QueryStore:
    """Open the store a URL names, read-only. Bad URL → ConfigError listing the accepted forms."""
    if not isinstance(url, str) or not url.strip():
        raise ConfigError(f"empty store URL; expected one of: {ACCEPTED_URLS}")
    scheme = url.partition("://")[0].lower() if "://" in url else "sqlite"
    if scheme not in _REGISTRY:
        raise ConfigError(
            f"store URL {url!r}: unknown scheme {scheme!r}; expected one of: {ACCEPTED_URLS}"
        )
    return _resolve(scheme, url)(url)
