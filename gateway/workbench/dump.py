"""Register-image dumps: what a Modbus station held at successive polls, as JSON.

``leakfleet probe modbus --dump FILE`` writes them, ``leakfleet profile check`` reads them (and
the simulator's samples are in the same form)::

    {"format": "leakfleet-register-dump", "version": 2, "device_id": 3, "comment": "...",
     "snapshots": [
       {"at": "2026-12-03T08:00:00Z",
        "holding": {"50": [0]}, "input": {"0": [65534, 12, 0], "100": [...]},
        "coils": {"0": [1, 0]}, "discrete": {"0": [1, 0, 0, 0]}}]}

Each table maps a start address (decimal text) to the consecutive values read from there.
"""

from __future__ import annotations

import json
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field
from datetime import UTC, datetime
from typing import Any

__all__ = ["FORMAT", "TABLES", "Dump", "Snapshot", "dump_from_json", "dump_to_json"]

FORMAT = "leakfleet-register-dump"
TABLES = ("holding", "input", "coils", "discrete")


@dataclass(frozen=True, slots=True)
class Snapshot:
    at: datetime
    values: Mapping[tuple[str, int], int]  # (table, address) → register value or bit

    def table(self, name: str) -> dict[int, int]:
        return {a: v for (t, a), v in self.values.items() if t == name}


@dataclass(frozen=True, slots=True)
class Dump:
    device_id: int
    snapshots: tuple[Snapshot, ...]
    comment: str = ""
    extra: Mapping[str, Any] = field(default_factory=dict)


def _runs(values: Mapping[int, int]) -> dict[str, list[int]]:
    out: dict[str, list[int]] = {}
    start = prev = None
    for address in sorted(values):
        if prev is None or address != prev + 1:
            start = address
            out[str(start)] = []
        assert start is not None
        out[str(start)].append(values[address])
        prev = address
    return out


def dump_to_json(dump: Dump) -> str:
    snaps = []
    for s in dump.snapshots:
        entry: dict[str, Any] = {"at": s.at.astimezone(UTC).isoformat().replace("+00:00", "Z")}
        for table in TABLES:
            part = s.table(table)
            if part:
                entry[table] = _runs(part)
        snaps.append(entry)
    doc = {"format": FORMAT, "version": 2, "device_id": dump.device_id,
           "comment": dump.comment, **dump.extra, "snapshots": snaps}
    return json.dumps(doc, indent=1) + "\n"


def _fail(where: str, what: str) -> ValueError:
    return ValueError(f"register dump: {where}: {what}")


def dump_from_json(text: str) -> Dump:
    """A v2 dump from its JSON text; one-line ValueError naming the place of any mistake."""
    try:
        doc = json.loads(text)
    except json.JSONDecodeError as exc:
        raise _fail("file", f"not JSON ({exc.msg} at line {exc.lineno})") from None
    if not isinstance(doc, dict) or doc.get("format") != FORMAT:
        raise _fail("format", f"expected {FORMAT!r}")
    if doc.get("version") != 2:
        raise _fail("version", f"expected 2, got {doc.get('version')!r}")
    device = doc.get("device_id", 1)
    if isinstance(device, bool) or not isinstance(device, int) or not 0 <= device <= 255:
        raise _fail("device_id", f"expected 0..255, got {device!r}")
    raw = doc.get("snapshots")
    if not isinstance(raw, list) or not raw:
        raise _fail("snapshots", "expected a non-empty list")
    snaps = []
    for i, entry in enumerate(raw):
        where = f"snapshots[{i}]"
        if not isinstance(entry, dict):
            raise _fail(where, "expected an object")
        try:
            at = datetime.fromisoformat(str(entry.get("at", "")).replace("Z", "+00:00"))
        except ValueError:
            raise _fail(f"{where}.at", "expected an ISO 8601 time") from None
        if at.tzinfo is None:
            at = at.replace(tzinfo=UTC)
        values: dict[tuple[str, int], int] = {}
        for table in TABLES:
            blocks = entry.get(table, {})
            if not isinstance(blocks, dict):
                raise _fail(f"{where}.{table}", "expected an object of start address → values")
            limit = 1 if table in ("coils", "discrete") else 0xFFFF
            for start_text, seq in blocks.items():
                if not str(start_text).isdigit() or not isinstance(seq, list):
                    raise _fail(f"{where}.{table}.{start_text}", "expected a decimal start "
                                "address and a list of values")
                start = int(start_text)
                for k, v in enumerate(seq):
                    if isinstance(v, bool) or not isinstance(v, int) or not 0 <= v <= limit:
                        raise _fail(f"{where}.{table}.{start_text}[{k}]",
                                    f"expected an integer 0..{limit}, got {v!r}")
                    if not 0 <= start + k <= 0xFFFF:
                        raise _fail(f"{where}.{table}.{start_text}", "addresses beyond 65535")
                    values[(table, start + k)] = v
        snaps.append(Snapshot(at, values))
    extra = {k: v for k, v in doc.items()
             if k not in ("format", "version", "device_id", "comment", "snapshots")}
    return Dump(device, tuple(snaps), str(doc.get("comment", "")), extra)


def merge(snapshots: Sequence[Mapping[tuple[str, int], int]]) -> dict[tuple[str, int], int]:
    """The union of several partial reads taken in one poll."""
    out: dict[tuple[str, int], int] = {}
    for s in snapshots:
        out.update(s)
    return out
