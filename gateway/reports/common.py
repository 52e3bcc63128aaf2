"""Shared report pieces: the time range and filters, store access, the report document."""

from __future__ import annotations

import argparse
import re
from collections.abc import Callable
from dataclasses import dataclass
from datetime import UTC, date, datetime, timedelta
from typing import TYPE_CHECKING, Any, Literal

if TYPE_CHECKING:
    import pandas as pd

SCHEMA = 1
DEFAULT_STORE = "sqlite:///./leakfleet.db"
DEFAULT_SHIFTS = "early=06:00-14:00,late=14:00-22:00,night=22:00-06:00"
KINDS = (
    "yield",
    "capability",
    "calibration",
    "grr",
    "type1",
    "advise",
    "master",
    "part",
    "retests",
    "standards",
    "shift",
)

_RELATIVE = re.compile(r"^\s*(\d+(?:\.\d+)?)\s*([smhdw])\s*$")
_SECONDS = {"s": 1, "m": 60, "h": 3600, "d": 86400, "w": 7 * 86400}



@dataclass(frozen=True)
class Filters:
    since: datetime
    until: datetime
    station: str | None = None
    line: str | None = None
    program: str | None = None

    def to_dict(self) -> dict[str, Any]:
        return {
            "since": self.since.isoformat(),
            "until": self.until.isoformat(),
            "station": self.station,
            "line": self.line,
            "program": self.program,
        }


def span(f: Filters) -> str:
    """The range for a heading; the default start (everything stored) is said in words."""
    end = f"{f.until:%Y-%m-%d %H:%M} UTC"
    if f.since == datetime(1970, 1, 1, tzinfo=UTC):
        return f"everything stored until {end}"
    return f"{f.since:%Y-%m-%d %H:%M} .. {end}"


def parse_time(text: str, now: datetime, what: str) -> datetime:
    """ISO 8601 date or date-time (naive = UTC), or a span before ``now`` such as 7d / 12h."""
    m = _RELATIVE.match(text)
    if m:
        return now - timedelta(seconds=float(m.group(1)) * _SECONDS[m.group(2)])
    try:
        if re.fullmatch(r"\d{4}-\d{2}-\d{2}", text.strip()):
            d = date.fromisoformat(text.strip())
            return datetime(d.year, d.month, d.day, tzinfo=UTC)
        value = datetime.fromisoformat(text.strip().replace("Z", "+00:00"))
    except ValueError:
        raise ValueError(
            f"{what}: expected an ISO 8601 date/time or a span like 7d, 12h; got {text!r}"
        ) from None
    return value if value.tzinfo else value.replace(tzinfo=UTC)


def newest_record_time(store: Any) -> datetime | None:
    """End time of the newest result or calibration in ``store`` (None: it holds neither)."""
    import pandas as pd

    newest: list[datetime] = []
    for frame in (store.latest_results_per_station(), store.latest_calibration_per_station()):
        if not frame.empty:
            newest.append(pd.Timestamp(frame["ended_at"].max()).to_pydatetime())
    return max(newest, default=None)


def filters_from(
    args: argparse.Namespace,
    now: datetime | None = None,
    get_store: Callable[[], Any] | None = None,
) -> Filters:
    """The report's range and filters. Without ``--until`` the end is ``now``, moved to just
    after the newest record in the store when that is later: station clocks that run ahead
    (the simulator at ``--speed``, a clock set wrong) would otherwise hide their newest
    results, as the dashboard's data clock also avoids."""
    now = now or datetime.now(UTC)
    # both texts first: a typo is reported before any store is opened
    since = (
        parse_time(args.since, now, "--since")
        if getattr(args, "since", None)
        else datetime(1970, 1, 1, tzinfo=UTC)
    )
    if getattr(args, "until", None):
        until = parse_time(args.until, now, "--until")
    else:
        until = now
        newest = newest_record_time(get_store()) if get_store is not None else None
        if newest is not None and newest >= until:
            until = newest + timedelta(microseconds=1)
    if since >= until:
        raise ValueError(
            f"--since ({since.isoformat()}) must be before --until ({until.isoformat()})"
        )
    return Filters(since, until, args.station, args.line, args.program)


def quantity(text: str | None, kind: str, default_unit: str, what: str) -> float | None:
    if text is None:
        return None
    from gateway.units import parse_quantity

    try:
        return parse_quantity(text, kind, default_unit=default_unit).canonical  # type: ignore[arg-type]
    except ValueError as exc:
        raise ValueError(f"{what}: {exc}") from None


def open_store_url(url: str) -> Any:
    try:
        from gateway.store import open_store  # type: ignore[attr-defined,unused-ignore]
    except ImportError as exc:
        from gateway.errors import StoreError

        raise StoreError(f"store support is not available in this build ({exc})") from None
    return open_store(url)


def store_results(store: Any, f: Filters, **extra: Any) -> pd.DataFrame:
    return store.results(
        f.since, f.until, station=f.station, line=f.line, program=f.program, **extra
    )


def store_calibrations(store: Any, f: Filters) -> pd.DataFrame:
    return store.calibrations(f.since, f.until, station=f.station, line=f.line, program=f.program)


@dataclass
class Report:
    """One computed report: its figures (JSON-ready), the range it covers and its text view."""

    kind: str
    filters: dict[str, Any] | None
    result: Any  # JSON-ready
    text: str

    def document(self) -> dict[str, Any]:
        """``{"schema", "kind", "filters", "result"}``: what ``--json`` prints."""
        return {"schema": SCHEMA, "kind": self.kind, "filters": self.filters, "result": self.result}

    def to_json(self) -> dict[str, Any]:
        return self.document()

    def to_text(self) -> str:
        return self.text

    def to_html(self, paper: Literal["a4", "letter"] = "a4") -> str:
        """The printable page; only the shift report has one (ValueError for the others)."""
        from gateway.reports.shift_html import render_shift_html

        return render_shift_html(self.document(), paper=paper)


def known_ids(store: Any, args: argparse.Namespace) -> Any:
    """A --station or --line the store has never seen is a typo, not "no tests": say so,
    with the close ones."""
    import difflib

    for option, column in (("station", "station"), ("line", "line")):
        wanted = getattr(args, option, None)
        stations = getattr(store, "stations", None)
        if not wanted or not callable(stations):
            continue
        frame = stations()
        if frame is None or column not in frame or frame.empty:
            continue
        known = sorted({str(v) for v in frame[column].dropna()})
        if wanted not in known:
            close = difflib.get_close_matches(wanted, known, n=3, cutoff=0.5)
            hint = f"; did you mean {', '.join(close)}?" if close else ""
            raise ValueError(f"--{option} {wanted!r}: no such {option} in the store "
                             f"({len(known)} known: {', '.join(known[:8])}"
                             f"{' ...' if len(known) > 8 else ''}){hint}")
    return store


def pd_iso(value: Any) -> str:
    """ISO 8601 text of a pandas/py datetime."""
    return str(value.isoformat()) if hasattr(value, "isoformat") else str(value)


def latest_lower(results: pd.DataFrame) -> float | None:
    """The latest lower limit in ``results`` (sorted by time), if any result has one."""
    if "lower_limit_sccm" not in results.columns:
        return None
    lower = results["lower_limit_sccm"].dropna()
    return float(lower.iloc[-1]) if len(lower) else None


def reject_limit(results: pd.DataFrame) -> float:
    """The reject limit of the latest result."""
    return float(results.sort_values("ended_at")["reject_limit_sccm"].iloc[-1])
