"""Compare a journal with the simulator's truth log: what arrived against what was sent.

    report = compare(truth_entries, read_journal(db_path), types={"L1-S1": "lf-delim", ...})
    assert report.ok, report.summary()

The journal is read with plain ``sqlite3`` from the documented schema (one column per
canonical field, timestamps as integer microseconds since the epoch, UTC), so this check does
not lean on the code it checks. What a correct gateway must have (sim/README.md, truth log):

* every result and calibration the station put on the wire while someone could hear it
  (lf-delim: ``listeners`` > 0 and the line not cut short; the others keep their records until
  read), exactly once, each ``reported`` field equal within half its ``resolution`` step;
* nothing the station did not send;
* every garbage line (line noise, cut lines) in the quarantine, byte for byte.
"""

from __future__ import annotations

import math
import sqlite3
from collections.abc import Iterable, Mapping
from dataclasses import dataclass, field
from datetime import UTC, datetime, timedelta
from pathlib import Path
from typing import Any

__all__ = ["NO_CLOCK", "SHEET_TYPES", "Report", "compare", "config_for_plant", "expected",
           "program_sheet", "read_journal", "station_types"]

_EPOCH = datetime(1970, 1, 1, tzinfo=UTC)
_TIMES = ("ended_at", "received_at", "at")


def _time(us: int | None) -> datetime | None:
    return None if us is None else _EPOCH + timedelta(microseconds=us)


def read_journal(path: Path) -> dict[str, list[dict[str, Any]]]:
    conn = sqlite3.connect(f"file:{path}?mode=ro", uri=True)
    conn.row_factory = sqlite3.Row
    out: dict[str, list[dict[str, Any]]] = {}
    try:
        for table in ("results", "calibrations", "statuses", "quarantine"):
            rows = [dict(r) for r in conn.execute(f"SELECT * FROM {table} ORDER BY seq")]
            for row in rows:
                for key in _TIMES:
                    if key in row and isinstance(row[key], int):
                        row[key] = _time(row[key])
            out[table] = rows
    finally:
        conn.close()
    return out


#: types with no clock: a record's time is the gateway's, so a result is known by its cycle
NO_CLOCK = ("lf-noclock", "lf-mbnoclk")
#: streaming types: a line reaches only the clients connected when it is sent
STREAMED = ("lf-delim", "lf-semi", "lf-noclock")


def _key(kind: str, station: str, fields: Mapping[str, Any], clockless: bool = False,
         nth: int = 0) -> tuple[Any, ...]:
    if clockless:
        if kind == "result":
            return ("result", station, int(fields["cycle"]))
        return ("calibration", station, fields["program"], nth)
    ended = fields["ended_at"]
    if isinstance(ended, str):
        ended = datetime.fromisoformat(ended.replace("Z", "+00:00"))
    if kind == "result":
        return ("result", station, int(fields["cycle"]), ended)
    return ("calibration", station, fields["program"], ended)


def expected(entry: Mapping[str, Any], station_type: str) -> bool:
    """Could a correct gateway have received this truth entry?"""
    if entry.get("unread"):
        return False  # kept where the type's profile does not read (e.g. no calibration block)
    if station_type in STREAMED:
        # a streamed line reaches only the clients connected at that moment
        return bool(entry.get("listeners")) and entry.get("fault") != "truncated"
    return True


def _close(a: Any, b: Any, step: float) -> bool:
    if a is None or b is None:
        return a is None and b is None
    if isinstance(a, (bool, str)) or isinstance(b, (bool, str)):
        return bool(a == b) if not isinstance(a, bool) else bool(a) == bool(b)
    if isinstance(a, datetime) or isinstance(b, datetime):
        return a == b
    fa, fb = float(a), float(b)
    return math.isclose(fa, fb, rel_tol=1e-9, abs_tol=step / 2 + 1e-9)


@dataclass
class Report:
    expected: int = 0
    found: int = 0
    missing: list[dict[str, Any]] = field(default_factory=list)
    mismatched: list[tuple[dict[str, Any], dict[str, Any], list[str]]] = field(
        default_factory=list
    )
    extra: list[dict[str, Any]] = field(default_factory=list)
    garbage: int = 0
    garbage_missing: list[dict[str, Any]] = field(default_factory=list)
    garbage_accepted: list[dict[str, Any]] = field(default_factory=list)  # taken as record data
    quarantine_unexplained: list[dict[str, Any]] = field(default_factory=list)

    @property
    def ok(self) -> bool:
        return not (self.missing or self.mismatched or self.extra or self.garbage_missing)

    def summary(self) -> str:
        lines = [
            f"expected {self.expected}, found {self.found}, missing {len(self.missing)}, "
            f"mismatched {len(self.mismatched)}, extra {len(self.extra)}, garbage "
            f"{self.garbage} ({len(self.garbage_missing)} lost, {len(self.garbage_accepted)} "
            "taken for record data by the parser), quarantine rows "
            f"not explained by garbage {len(self.quarantine_unexplained)}"
        ]
        for e in self.missing[:10]:
            lines.append(f"  missing {e['station']} {e['kind']} {e['reported'].get('cycle')} "
                         f"{e['reported']['ended_at']} fault={e.get('fault')}")
        for e, row, bad in self.mismatched[:10]:
            lines.append(f"  mismatch {e['station']} {e['kind']}: " + "; ".join(
                f"{k}: truth {e['reported'].get(k)!r} journal {row.get(k)!r}" for k in bad))
        for row in self.extra[:10]:
            lines.append(f"  extra {row.get('station')} {row.get('cycle')} {row.get('ended_at')}")
        for g in self.garbage_missing[:10]:
            lines.append(f"  garbage lost {g['station']}: {g['raw']!r}")
        for g in self.garbage_accepted[:10]:
            lines.append(f"  garbage parsed as data {g['station']}: {g['raw']!r}")
        for q in self.quarantine_unexplained[:10]:
            lines.append(f"  quarantine {q['station']}: {q['reason']}: {q['raw'][:80]!r}")
        return "\n".join(lines)


def _wire_text(raw_hex: str) -> str:
    # the gateway decodes line bytes as ASCII with backslashreplace (exact and storable)
    return bytes.fromhex(raw_hex).decode("ascii", "backslashreplace")


def compare(
    truth: Iterable[Mapping[str, Any]],
    journal: Mapping[str, list[dict[str, Any]]],
    types: Mapping[str, str],
    *,
    required: Iterable[Mapping[str, Any]] | None = None,
) -> Report:
    """Check ``journal`` against ``truth``; ``required`` (default: all of truth) is the part
    that must have arrived (e.g. what was sent after the gateway was up)."""
    truth = list(truth)
    required = truth if required is None else list(required)
    report = Report()
    rows: dict[tuple[Any, ...], list[dict[str, Any]]] = {}
    nth: dict[tuple[str, str], int] = {}

    def key_of(kind: str, station: str, fields: Mapping[str, Any]) -> tuple[Any, ...]:
        clockless = types.get(station) in NO_CLOCK
        n = 0
        if clockless and kind == "calibration":
            n = nth.get((station, fields["program"]), 0)
            nth[(station, fields["program"])] = n + 1
        return _key(kind, station, fields, clockless, n)

    for kind, table in (("result", "results"), ("calibration", "calibrations")):
        for row in journal.get(table, []):
            rows.setdefault(key_of(kind, row["station"], row), []).append(row)
    nth.clear()
    # a clockless calibration is known by its place among those the gateway could hear
    keys = {id(e): key_of(e["kind"], e["station"], e["reported"]) for e in truth
            if e["kind"] in ("result", "calibration") and not e.get("unread")
            and (types.get(e["station"]) not in NO_CLOCK
                 or expected(e, types.get(e["station"], "")))}
    sent = set(keys.values())

    for e in required:
        if e["kind"] not in ("result", "calibration"):
            continue
        if not expected(e, types.get(e["station"], "")):
            continue
        report.expected += 1
        found = rows.get(keys[id(e)], [])
        if not found:
            report.missing.append(dict(e))
            continue
        report.found += 1
        row = found[0]
        steps = e.get("resolution", {})
        bad = [k for k, v in e["reported"].items()
               if k in row and not _close(_as_time(k, v), row[k], float(steps.get(k, 0.0)))]
        if bad or len(found) != 1:
            report.mismatched.append((dict(e), row, bad or ["(stored more than once)"]))
    for key, found in rows.items():
        if key not in sent:
            report.extra.extend(found)

    quarantine = journal.get("quarantine", [])
    explained: set[int] = set()
    must = {id(g) for g in required}
    for g in truth:
        if g["kind"] != "garbage":
            continue
        text = _wire_text(g["raw_hex"]).replace("\r\n", "\n")
        hit = [i for i, q in enumerate(quarantine)
               if q["station"] == g["station"] and text in q["raw"].replace("\r\n", "\n")]
        explained.update(hit)
        if types.get(g["station"]) in STREAMED and not g.get("listeners"):
            continue  # nobody could have heard it
        if id(g) not in must:
            continue
        report.garbage += 1
        if not hit:
            in_record = any(
                text in (row.get("raw") or "").replace("\r\n", "\n")
                for table in ("results", "calibrations")
                for row in journal.get(table, [])
                if row["station"] == g["station"]
            )
            (report.garbage_accepted if in_record else report.garbage_missing).append(dict(g))
    report.quarantine_unexplained = [q for i, q in enumerate(quarantine) if i not in explained]
    return report


def _as_time(key: str, value: Any) -> Any:
    if key == "ended_at" and isinstance(value, str):
        return datetime.fromisoformat(value.replace("Z", "+00:00"))
    return value


_PROFILE_FOR_TYPE = {t: t for t in ("lf-delim", "lf-kv", "lf-mbtcp", "lf-mbrtu", "lf-semi",
                                     "lf-noclock", "lf-mbinput", "lf-mblast", "lf-mbnoclk",
                                     "lf-ticket")}
#: types that send a program number (the station's programs table names it)
_NUMBERED = ("lf-mbtcp", "lf-mbrtu", "lf-semi", "lf-mbinput", "lf-mblast", "lf-mbnoclk")
#: types that send no reject limit or times: the plant's program sheet supplies them
SHEET_TYPES = ("lf-semi", "lf-noclock")


def program_sheet(scenario: Any) -> str:
    """``[parameters."<program>"]`` tables with the scenario's program values."""
    out = []
    for name, p in scenario.programs.items():
        out += [f'[parameters."{name}"]', f'reject_limit = "{p.reject_limit_sccm!r} sccm"']
        if p.lower_limit_sccm is not None:
            out.append(f'lower_limit = "{p.lower_limit_sccm!r} sccm"')
        out += [f'fill = "{p.fill_s!r} s"', f'stabilise = "{p.stabilise_s!r} s"',
                f'test = "{p.test_s!r} s"', ""]
    return "\n".join(out)


def config_for_plant(
    plant: Any,
    store: str,
    *,
    poll: Mapping[str, str] | None = None,
    timeout: str = "1 s",
    runtime: str = 'reconnect_initial = "0.05 s"\nreconnect_max = "0.5 s"\nline_gap = "0.05 s"',
    traces: bool = False,
) -> str:
    """A gateway.toml for a running ``sim.run.Plant``: one station per endpoint, the built-in
    profile of its type, the scenario's program numbers and time zone; with ``traces``, the
    curves of every station that sends them are collected."""
    sc = plant.scenario
    poll = dict(poll or {})
    lines = [
        f'site = "{sc.site}"', 'gateway_id = "test-gw"', f'timezone = "{sc.timezone}"',
        f'store = "{store}"', "", "[runtime]", runtime, "",
    ]
    if any(st.type in SHEET_TYPES for st in sc.stations):
        lines.append(program_sheet(sc))
    for st in sc.stations:
        ep = plant.endpoints[st.name]
        endpoint = f"tcp://{ep.host}:{ep.port}" if ep.transport == "tcp" else str(ep.path)
        lines += [
            "[[stations]]", f'id = "{st.name}"', f'line = "{st.line}"',
            f'profile = "{_PROFILE_FOR_TYPE[st.type]}"', f'endpoint = "{endpoint}"',
        ]
        if st.type not in STREAMED:
            lines.append(f'timeout = "{timeout}"')
            lines.append(f'poll_interval = "{poll.get(st.type, "0.05 s")}"')
        if st.type in _NUMBERED:
            progs = ", ".join(f'{n} = "{name}"' for n, name in st.programs.items())
            lines.append(f"programs = {{ {progs} }}")
        if st.type in ("lf-mbtcp", "lf-mbrtu"):
            lines.append(f"overrides = {{ device_id = {st.device_id} }}")
        if st.type == "lf-ticket":
            lines.append(f"overrides = {{ address = {st.address} }}")
        if traces and st.trace_interval_s > 0:
            lines.append("traces = true")
        lines.append("")
    return "\n".join(lines)


def station_types(plant: Any) -> dict[str, str]:
    return {st.name: st.type for st in plant.scenario.stations}
