"""Config and profile files with every kind of mistake: one clear line, exit 2, nothing started.

Each case is a real ``python -m gateway gateway --config FILE`` run (a subprocess, as a user
starts it). It must exit 2 with exactly one line on stderr naming the file, the key and what was
expected, print no traceback, open no connection to any configured station (a listening socket
stands in for the good station next to the bad one) and create no journal.
"""

from __future__ import annotations

import socket
import subprocess
import sys
from collections.abc import Callable, Iterator
from pathlib import Path

import pytest

REPO = Path(__file__).resolve().parents[2]
pytestmark = pytest.mark.timeout(120)

GOOD_PROFILE = (REPO / "gateway/profiles/builtin/lf-delim.toml").read_text()


def _station(sid: str, endpoint: str, extra: str = "", profile: str = "lf-delim") -> str:
    return (f'[[stations]]\nid = "{sid}"\nline = "L1"\nprofile = "{profile}"\n'
            f'endpoint = "{endpoint}"\n{extra}\n')  # fmt: skip


# (case id, top-level text, bad station extra text, expected words in the one error line)
CASES = [
    ("toml-syntax", 'site = "Northmere Works\n', "", ["line"]),
    ("site-missing", "", "", ["site", "required"]),
    ("site-type", "site = 5\n", "", ["site", "string"]),
    ("unknown-top-key", 'site = "N"\nstationz = 1\n', "", ["stationz", "unknown"]),
    ("store-scheme", 'site = "N"\nstore = "ftp://x/y"\n', "", ["store"]),
    ("timezone", 'site = "N"\ntimezone = "Mars/Olympus"\n', "", ["timezone", "Mars/Olympus"]),
    ("runtime-negative", 'site = "N"\n[runtime]\nbatch_size = -1\n', "", ["batch_size"]),
    ("runtime-unknown", 'site = "N"\n[runtime]\nbogus = 1\n', "", ["bogus"]),
    ("duration-text", 'site = "N"\n', 'poll_interval = "fast"', ["poll_interval", "fast"]),
    ("duration-unit", 'site = "N"\n', 'timeout = "3 parsecs"', ["timeout"]),
    ("profile-unknown", 'site = "N"\n', "", ["profile", "lf-nope"]),
    ("endpoint-no-port", 'site = "N"\n', "", ["endpoint"]),
    ("programs-key", 'site = "N"\n', 'programs = { one = "HX-210" }', ["programs"]),
    ("override-unknown", 'site = "N"\n', "overrides = { speed = 3 }", ["overrides", "speed"]),
    ("override-type", 'site = "N"\n', 'overrides = { device_id = "seven" }', ["device_id"]),
    ("duplicate-id", 'site = "N"\n', "", ["L1-S0", "once"]),
    ("station-key", 'site = "N"\n', "colour = 'red'", ["colour"]),
]


def _config(case: str, top: str, extra: str, good_port: int, tmp: Path) -> str:
    store = f'store = "sqlite:///{tmp / "journal.db"}"\n' if "store =" not in top else ""
    text = top.replace('site = "N"', 'site = "Northmere Works"') + store
    if case == "toml-syntax":
        return text
    text += _station("L1-S0", f"tcp://127.0.0.1:{good_port}")
    sid, endpoint, profile = "L1-S1", "tcp://127.0.0.1:1", "lf-delim"
    if case == "profile-unknown":
        profile = "lf-nope"
    elif case == "endpoint-no-port":
        endpoint = "tcp://127.0.0.1"
    elif case == "duplicate-id":
        sid = "L1-S0"
    elif case == "override-type":
        profile = "lf-mbtcp"
    return text + _station(sid, endpoint, extra, profile)


def _run(cfg: Path) -> subprocess.CompletedProcess[str]:
    return subprocess.run(
        [sys.executable, "-m", "gateway", "gateway", "--config", str(cfg)],
        cwd=REPO, capture_output=True, text=True, timeout=60,
    )  # fmt: skip


def _assert_one_clear_line(
    run: subprocess.CompletedProcess[str], cfg: Path, words: list[str]
) -> None:
    assert run.returncode == 2, (run.returncode, run.stderr)
    lines = run.stderr.strip().splitlines()
    assert len(lines) == 1, run.stderr
    assert "Traceback" not in run.stderr
    line = lines[0]
    assert str(cfg.name) in line, line  # names the file
    for word in words:
        assert word.lower() in line.lower(), (word, line)


@pytest.fixture
def listener() -> Iterator[socket.socket]:
    """A station that must never be contacted by a gateway that refuses to start."""
    srv = socket.socket()
    srv.bind(("127.0.0.1", 0))
    srv.listen(8)
    srv.setblocking(False)
    yield srv
    srv.close()


@pytest.mark.parametrize(("case", "top", "extra", "words"), CASES, ids=[c[0] for c in CASES])
def test_config_mistake(case: str, top: str, extra: str, words: list[str], tmp_path: Path,
                        listener: socket.socket) -> None:  # fmt: skip
    cfg = tmp_path / f"{case}.toml"
    cfg.write_text(_config(case, top, extra, listener.getsockname()[1], tmp_path))
    run = _run(cfg)
    _assert_one_clear_line(run, cfg, words)
    with pytest.raises(BlockingIOError):
        listener.accept()  # nobody connected: the gateway did not start half-configured
    assert not (tmp_path / "journal.db").exists()


# (case id, edit of the good lf-delim profile, expected words)
PROFILE_CASES = [
    ("toml-syntax", lambda t: t.replace('name = "lf-delim"', 'name = "lf-delim'), ["line"]),
    ("unknown-dialect", lambda t: t.replace('kind = "delimited"', 'kind = "csvish"'),
     ["kind", "csvish"]),
    ("unknown-unit", lambda t: t.replace('unit = "kPa"', 'unit = "furlongs"'), ["furlongs"]),
    ("unknown-column", lambda t: t.replace('{ from = "loss", unit = "Pa"',
                                           '{ from = "losss", unit = "Pa"'), ["losss"]),
    ("bad-verdict-code", lambda t: t.replace('ACC = "pass"', 'ACC = "passed"'), ["passed"]),
    ("missing-transport", lambda t: t.replace('transport = "serial"\n', ""), ["transport"]),
    ("bad-mode", lambda t: t.replace('mode = "stream"', 'mode = "sometimes"'), ["mode"]),
    ("unknown-key", lambda t: t.replace("[dialect]", "[dialect]\ncolour = 1"), ["colour"]),
]


@pytest.mark.parametrize(("case", "edit", "words"), PROFILE_CASES,
                         ids=[c[0] for c in PROFILE_CASES])
def test_profile_mistake(case: str, edit: Callable[[str], str], words: list[str], tmp_path: Path,
                         listener: socket.socket) -> None:  # fmt: skip
    profiles = tmp_path / "profiles"
    profiles.mkdir()
    bad = profiles / "site-delim.toml"
    text = edit(GOOD_PROFILE).replace('name = "lf-delim"', 'name = "site-delim"')
    assert text != GOOD_PROFILE.replace('name = "lf-delim"', 'name = "site-delim"'), case
    bad.write_text(text)
    cfg = tmp_path / "gateway.toml"
    cfg.write_text(
        f'site = "Northmere Works"\nstore = "sqlite:///{tmp_path / "journal.db"}"\n'
        'profile_dirs = ["profiles"]\n'
        + _station("L1-S0", f"tcp://127.0.0.1:{listener.getsockname()[1]}")
        + _station("L1-S1", "tcp://127.0.0.1:1", profile="site-delim")
    )
    run = _run(cfg)
    assert run.returncode == 2, (run.returncode, run.stderr)
    lines = run.stderr.strip().splitlines()
    assert len(lines) == 1 and "Traceback" not in run.stderr, run.stderr
    assert "site-delim.toml" in lines[0], lines[0]  # names the profile file, not the config
    for word in words:
        assert word.lower() in lines[0].lower(), (word, lines[0])
    with pytest.raises(BlockingIOError):
        listener.accept()
    assert not (tmp_path / "journal.db").exists()
