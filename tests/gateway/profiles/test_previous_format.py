"""Profiles written for the first format still load and read their stations the same.

``previous/`` holds the built-in profiles as they first shipped. Since then fields a station
may leave out became optional (absent, never zero) and new keys arrived; none was renamed or
removed, so an old profile needs no edit. One difference in meaning: an empty value of an
optional field is now "no value" where the old format rejected the line; an old profile that
wants the line rejected adds ``empty = "error"`` to that field (gateway/profiles/README.md).
"""

from __future__ import annotations

from pathlib import Path

import pytest

from gateway.profiles import StationContext, load_profile
from gateway.profiles.check import check_sample
from gateway.records import Rejected
from tests.gateway.profiles.conftest import RECEIVED

HERE = Path(__file__).resolve().parent
SAMPLES = HERE.parents[2] / "gateway" / "profiles" / "samples"
SAMPLE = {"lf-delim": "lf-delim.txt", "lf-kv": "lf-kv.txt", "lf-mbtcp": "lf-mbtcp.json",
          "lf-mbrtu": "lf-mbrtu.json", "lf-print": "lf-print.txt"}


@pytest.mark.parametrize("name", sorted(SAMPLE))
def test_a_first_format_profile_reads_like_todays(name: str) -> None:
    ctx = StationContext("S1", "L1", "Europe/Berlin", {1: "HX-210"})
    data = (SAMPLES / SAMPLE[name]).read_bytes()
    old = check_sample(load_profile(HERE / "previous" / f"{name}.toml"), data, ctx, RECEIVED)
    new = check_sample(load_profile(name), data, ctx, RECEIVED)
    kept = [(e.where, e.item.to_dict()) for e in old
            if e.item is not None and not isinstance(e.item, Rejected)]
    ours = {e.where: e.item.to_dict() for e in new
            if e.item is not None and not isinstance(e.item, Rejected)}
    refused = {e.where: e.item.reason for e in new if isinstance(e.item, Rejected)}
    assert kept, "the old profile reads nothing"
    for where, record in kept:
        if where not in ours:  # today's built-in says empty = "error" where the old said nothing
            assert "missing" in refused[where], (where, refused[where])
            continue
        record.pop("profile"), ours[where].pop("profile")  # name@version differs: 1.0 vs 1.1
        record.pop("record_id", None), ours[where].pop("record_id", None)
        assert record == ours[where], where
