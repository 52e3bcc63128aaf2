"""Framed multi-line records and addressed queries: the profile keys, the parser, the config.

The XOR block check is the BCC of many ASCII protocols: the XOR of every byte from after STX
up to and including ETX (common practice). The frames below are written out by hand, with
their check worked out byte by byte in ``_bcc`` (a plain loop, not the code under test).
"""

from __future__ import annotations

import tomllib
from datetime import UTC, datetime
from pathlib import Path

import pytest

from gateway.config import load_config
from gateway.drivers.lines import RawLine
from gateway.drivers.serial import _Frames
from gateway.errors import ConfigError
from gateway.profiles import StationContext, load_profile, parse_profile
from gateway.profiles.decoders import serial_parser
from gateway.records import CalibrationEvent, Rejected, TestResult

AT = datetime(2026, 12, 3, 13, 0, tzinfo=UTC)
BUILTIN = Path(__file__).resolve().parents[3] / "gateway" / "profiles" / "builtin"


def _bcc(body: bytes) -> str:
    value = 0
    for b in body:
        value ^= b
    return f"{value:02X}"


def ticket(lines: list[str], check: str | None = None) -> list[bytes]:
    body = ("\r\n".join(lines) + "\r\n\x03").encode("ascii")
    return (b"\x02" + body + (check or _bcc(body)).encode()).split(b"\r\n")


TEST = ["ADR 01", "KIND TEST", "NO 000042", "DATE 03/12/26", "TIME 14:05:09", "PROG HX-210",
        "PART P-1", "PRESS 3.500", "LOSS ----", "LEAK ----", "LIMIT 2.000", "RESULT GROSS"]


def parse(lines: list[bytes], address: int | None = 1) -> list[object]:
    ctx = StationContext("S", "L", "Europe/Berlin", address=address)
    spec = load_profile("lf-ticket").serial
    assert spec is not None
    return list(serial_parser(spec, ctx).parse(lines, 1, AT))


def test_a_good_ticket_is_one_record_with_absent_readings() -> None:
    [r] = parse(ticket(TEST))
    assert isinstance(r, TestResult)
    assert r.cycle == 42 and r.verdict.value == "gross"
    assert r.leak_rate_sccm is None and r.pressure_loss_pa is None  # "----": absent, not 0
    # 3.500 bar = 350 000 Pa (pint: Quantity(3.5, "bar").to("Pa"))
    assert r.test_pressure_pa == pytest.approx(350_000.0)
    assert r.ended_at == datetime(2026, 12, 3, 13, 5, 9, tzinfo=UTC)  # 14:05:09 CET


def test_calibration_ticket() -> None:
    [c] = parse(ticket(["ADR 01", "KIND CAL", "DATE 03/12/26", "TIME 14:10:02", "PROG HX-210",
                        "MASTER 3.1", "STD 212.4", "NOMINAL 3.000", "RESULT OK"]))
    assert isinstance(c, CalibrationEvent) and c.passed is True
    assert c.standard_loss_pa == pytest.approx(212.4)


@pytest.mark.parametrize(("lines", "reason"), [
    (ticket(TEST, check="00"), "block check (xor8): the frame says 00"),
    (ticket(TEST, check="ZZ"), "is not 2 hex digits"),
    (ticket(TEST)[1:], "does not start with STX"),
    (ticket(TEST)[:-2], "no ETX"),
    (ticket([*TEST[:3], "NO 000043", *TEST[3:]]), "appears twice"),
    (ticket(["ADR 01", *TEST[1:], "COLOUR red"]), "key(s) no field maps"),
])
def test_bad_frames_are_rejected_with_the_reason(lines: list[bytes], reason: str) -> None:
    [r] = parse(lines)
    assert isinstance(r, Rejected) and reason in r.reason, r
    assert "\n" in r.raw  # the whole frame is kept for the audit


def test_an_answer_from_another_address_is_not_taken() -> None:
    [r] = parse(ticket(TEST), address=2)
    assert isinstance(r, Rejected) and "station address '01', this station is 2" in r.reason
    [ok] = parse(ticket(TEST), address=None)  # profile check without --address: no check
    assert isinstance(ok, TestResult)


def test_nak_is_an_empty_answer() -> None:
    assert parse([b"\x15"]) == []


def test_queries_carry_the_address() -> None:
    spec = load_profile("lf-ticket").serial
    assert spec is not None
    assert spec.requests[0].query_for(7) == b"\x0507T\r"
    assert spec.requests[1].query_for(12) == b"\x0512K\r"


def _doc(**serial: object) -> dict[str, object]:
    doc = tomllib.loads((BUILTIN / "lf-ticket.toml").read_text())
    doc["serial"].update(serial)  # type: ignore[union-attr]
    return doc


@pytest.mark.parametrize(("change", "key"), [
    ({"frame": {"start": "\u0002\u0002", "end": "\u0003"}}, "serial.frame.start"),
    ({"frame": {"start": "\u0002", "end": "\u0002"}}, "serial.frame.end"),
    ({"frame": {"start": "\u0002", "end": "\u0003", "check": "md5"}}, "serial.frame.check"),
    ({"requests": [{"query": "\u0005{adr}T\r"}]}, "serial.requests[0].query"),
    ({"requests": [{"query": "\u0005{address:02d}T\r", "end_line": "END"}]},
     "serial.requests[0].end_line"),
])
def test_profile_mistakes_name_the_key(change: dict[str, object], key: str) -> None:
    with pytest.raises(ConfigError) as info:
        parse_profile(_doc(**change), "t.toml")
    assert key in str(info.value) and "\n" not in str(info.value)


STATION = """
[[stations]]
id = "{id}"
line = "L3"
profile = "{profile}"
endpoint = "tcp://127.0.0.1:15306"
{extra}
"""


def _config(tmp_path: Path, *stations: tuple[str, str, str]) -> Path:
    text = 'site = "T"\n' + "".join(
        STATION.format(id=i, profile=p, extra=e) for i, p, e in stations)
    path = tmp_path / "gateway.toml"
    path.write_text(text)
    return path


def test_two_addressed_stations_share_a_line(tmp_path: Path) -> None:
    cfg = load_config(_config(tmp_path, ("A", "lf-ticket", "overrides = { address = 1 }"),
                              ("B", "lf-ticket", "overrides = { address = 2 }")))
    assert [s.overrides["address"] for s in cfg.stations] == [1, 2]


@pytest.mark.parametrize(("stations", "key", "expected"), [
    ((("A", "lf-ticket", ""),), "stations[A].overrides.address", "the station's address"),
    ((("A", "lf-ticket", "overrides = { address = 1 }"),
      ("B", "lf-ticket", "overrides = { address = 1 }")),
     "stations[B].overrides.address", "distinct station addresses"),
    ((("A", "lf-ticket", "overrides = { address = 1 }"), ("B", "lf-kv", "")),
     "stations[B].endpoint", "an endpoint of its own"),
    ((("A", "lf-ticket", "overrides = { address = 1 }"),
      ("B", "lf-ticket", "overrides = { address = 2, baudrate = 19200 }")),
     "stations[B].profile", "the same baud rate"),
])
def test_line_sharing_mistakes(tmp_path: Path, stations: tuple[tuple[str, str, str], ...],
                               key: str, expected: str) -> None:
    with pytest.raises(ConfigError) as info:
        load_config(_config(tmp_path, *stations))
    assert key in str(info.value) and expected in str(info.value)


def test_streamed_frames_are_collected_and_strays_go_alone() -> None:
    frames = _Frames("\x02", "\x03", max_lines=5)
    lines = [RawLine(x) for x in ticket(TEST[:3])]
    got = [frames.take(x) for x in [RawLine(b"noise"), *lines]]
    assert got[0] == [[RawLine(b"noise")]]  # outside a frame: parsed (and rejected) alone
    assert got[1:-1] == [[]] * (len(lines) - 1)
    assert got[-1] == [lines]
    # a frame cut by the next start byte is handed over on its own, then the new one
    first = frames.take(lines[0])
    assert first == [] and frames.take(lines[0]) == [[lines[0]]]
    # and one that never ends is handed over at max_lines
    for _ in range(3):
        assert frames.take(RawLine(b"KEY 1")) == []
    assert frames.take(RawLine(b"KEY 2")) == [[lines[0], *[RawLine(b"KEY 1")] * 3,
                                                RawLine(b"KEY 2")]]
