"""What changes between polls: how a person finds a station's counter and its result block.

Given snapshots of the same registers taken some seconds apart (a few cycles of the station),
``watch_report`` lists the addresses that changed, finds counter candidates (registers, or
register pairs in either word order, that only ever step up by a small amount, wrap included),
and the blocks that change together with the best counter: one block that is rewritten at every
step is a last-result block; blocks that move along by a fixed stride are slots of a ring.
"""

from __future__ import annotations

import itertools
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field

__all__ = ["Counter", "WatchReport", "changed_runs", "watch_report"]

Key = tuple[str, int]  # (table, address)
Snapshot = Mapping[Key, int]


@dataclass(frozen=True, slots=True)
class Counter:
    table: str
    address: int
    width: int  # registers: 1 or 2
    order: str  # "" or "BA" (bytes swapped) for one register; ABCD, CDAB, BADC or DCBA
    values: tuple[int, ...]
    steps: int  # how many times it advanced

    @property
    def label(self) -> str:
        kind = (f"uint16{' bytes swapped' if self.order else ''}" if self.width == 1
                else f"uint32 {self.order}")
        return f"{self.table} {self.address} ({kind})"


@dataclass(frozen=True, slots=True)
class WatchReport:
    snapshots: int
    changed: dict[Key, int]  # address → how many times it changed
    counters: list[Counter]
    blocks: list[tuple[str, int, int]]  # (table, first, last) changing with the best counter
    ring: tuple[int, int] | None  # (base, stride) when the blocks move along a ring
    notes: list[str] = field(default_factory=list)


def _series(snapshots: Sequence[Snapshot], key: Key) -> list[int] | None:
    values = [s.get(key) for s in snapshots]
    if any(v is None for v in values):
        return None
    return [int(v) for v in values if v is not None]


def _steps(values: Sequence[int], modulus: int, max_step: int) -> int | None:
    """Advances of a counter that only steps up (mod ``modulus``) by 1..max_step, or None."""
    steps = 0
    for a, b in itertools.pairwise(values):
        d = (b - a) % modulus
        if d == 0:
            continue
        if d > max_step:
            return None
        steps += 1
    return steps


def _swap(word: int) -> int:
    return ((word & 0xFF) << 8) | (word >> 8)


def changed_runs(keys: Sequence[Key], gap: int = 2) -> list[tuple[str, int, int]]:
    """Contiguous runs (table, first, last) of ``keys``, bridging gaps of up to ``gap``."""
    runs: list[tuple[str, int, int]] = []
    for table, address in sorted(keys):
        if runs and runs[-1][0] == table and address - runs[-1][2] <= gap + 1:
            runs[-1] = (table, runs[-1][1], address)
        else:
            runs.append((table, address, address))
    return runs


def _ring(addresses: Sequence[int]) -> tuple[int, int] | None:
    """(first address, stride) when the changed addresses repeat with one period.

    For each candidate stride the addresses' residues are counted against what as many
    addresses spread at random would give; a ring's changing fields sit at the same offsets of
    every slot, so the right stride leaves far fewer residues than chance. Two slots at least
    must have changed.
    """
    n = len(addresses)
    if n < 8:
        return None
    best: tuple[float, int] | None = None
    for stride in range(3, 126):
        if addresses[-1] - addresses[0] < 2 * stride - 1:
            break
        distinct = len({a % stride for a in addresses})
        expected = stride * (1.0 - (1.0 - 1.0 / stride) ** n)
        ratio = distinct / expected
        if best is None or ratio < best[0] - 1e-9:
            best = (ratio, stride)
    if best is None or best[0] > 0.85:  # a contiguous block scores about 1
        return None
    return addresses[0], best[1]


def watch_report(snapshots: Sequence[Snapshot], max_step: int = 5) -> WatchReport:
    """Counters and changing blocks across ``snapshots`` (each (table, address) → value)."""
    if len(snapshots) < 2:
        raise ValueError("watching needs at least two snapshots")
    keys = sorted(set().union(*snapshots))
    changed: dict[Key, int] = {}
    for key in keys:
        series = _series(snapshots, key)
        if series is None:
            continue
        n = sum(a != b for a, b in itertools.pairwise(series))
        if n:
            changed[key] = n
    counters: list[Counter] = []
    for table, address in sorted(changed):
        series = _series(snapshots, (table, address))
        if series is None or table in ("coils", "discrete"):
            continue
        for swapped in (False, True):  # bytes low first in each word: "BA", BADC, DCBA
            words = [_swap(v) for v in series] if swapped else series
            steps = _steps(words, 1 << 16, max_step)
            if steps and steps >= 1:
                counters.append(Counter(table, address, 1, "BA" if swapped else "",
                                        tuple(words), steps))
            for other, order in ((address + 1, "BADC" if swapped else "ABCD"),
                                 (address - 1, "DCBA" if swapped else "CDAB")):
                pair = _series(snapshots, (table, other))
                if pair is None:
                    continue
                if swapped:
                    pair = [_swap(v) for v in pair]
                hi, lo = (words, pair) if order in ("ABCD", "BADC") else (pair, words)
                joined = [(h << 16) | low for h, low in zip(hi, lo, strict=True)]
                at = address if order in ("ABCD", "BADC") else other
                if any(h for h in hi) and (n32 := _steps(joined, 1 << 32, max_step)):
                    counters.append(Counter(table, at, 2, order, tuple(joined), n32))
    # the best counter: steps most often (one step per station cycle), then plain byte order
    # (a swapped reading of a word that steps by one steps by 256), one word, lowest address
    counters.sort(key=lambda c: (-c.steps, "BA" in c.order or c.order in ("BADC", "DCBA"),
                                 c.width, c.address))
    blocks: list[tuple[str, int, int]] = []
    ring = None
    notes: list[str] = []
    if counters:
        best = counters[0]
        advances = [i for i, (a, b) in enumerate(itertools.pairwise(best.values), 1) if a != b]
        own = {(best.table, best.address + k) for k in range(best.width)}
        together: dict[Key, int] = {}
        for i in advances:
            for k in keys:
                seq = _series(snapshots, k)
                if k not in own and seq is not None and seq[i] != seq[i - 1]:
                    together[k] = together.get(k, 0) + 1
        moved = sorted(a for (t, a) in together if t == best.table)
        # header registers (a state word beside the counter) stand alone: leave them out
        moved = [a for i, a in enumerate(moved)
                 if (i and a - moved[i - 1] <= 8) or (i + 1 < len(moved) and moved[i + 1] - a <= 8)]
        ring = _ring(moved)
        if ring is not None:
            blocks = [(best.table, moved[0], moved[-1])]
            notes.append(f"what changes repeats every {ring[1]} registers from about "
                         f"{ring[0]}: a ring of result slots (several slots change when the "
                         "station tests faster than the reads)")
        elif moved:
            keep = [k for k, n in together.items()
                    if n * 2 >= len(advances) and k[0] == best.table and k[1] in moved]
            blocks = [r for r in changed_runs(keep, gap=8) if r[2] - r[1] >= 1]
            if blocks:
                notes.append("the same block changes at every step: a last-result block")
        if best.width == 1:
            for other, order, at in ((best.address - 1, "ABCD", best.address - 1),
                                     (best.address + 1, "CDAB", best.address)):
                word = _series(snapshots, (best.table, other))
                if word is not None and not any(word):
                    notes.append(f"{best.label} may be the low word of a uint32 at "
                                 f"{best.table} {at} ({order}); its other word stays 0")
    else:
        notes.append("no register only ever steps up: no counter among the addresses read "
                     "(a flag or a change of the block may signal new results)")
    return WatchReport(len(snapshots), changed, counters, blocks, ring, notes)
