"""The shipped deploy files stay valid: the example config passes the gateway's own check,
the systemd units keep their safety settings, and every ``leakfleet ...`` command line in
deploy/ is one the current CLI accepts."""

from __future__ import annotations

import argparse
import configparser
import re
import shlex
from pathlib import Path

import pytest

from gateway.cli import build_parser, main
from gateway.sinks.cli import sinks_from_cli

DEPLOY = Path(__file__).resolve().parents[3] / "deploy"


def test_example_gateway_config_checks(capsys: pytest.CaptureFixture[str],
                                       monkeypatch: pytest.MonkeyPatch) -> None:
    # --check reads the sinks' secrets as the service would; here from the environment (the
    # example's token file exists only on an installed machine)
    monkeypatch.setenv("LEAKFLEET_INFLUX_TOKEN", "example-token")
    assert main(["gateway", "--config", str(DEPLOY / "gateway.toml"), "--check"]) == 0
    out = capsys.readouterr().out
    assert "sink mqtt" in out and "sink influx" in out
    assert "sink scada" in out and "sink opcua" in out  # Sparkplug B and the OPC UA server


def test_units_run_unprivileged_and_restart() -> None:
    for name in ("leakfleet-gateway.service", "leakfleet-dashboard.service"):
        unit = configparser.ConfigParser(strict=False, interpolation=None)
        unit.optionxform = str  # type: ignore[assignment,method-assign]
        unit.read(DEPLOY / "systemd" / name)
        service = unit["Service"]
        assert service["User"] == "leakfleet"
        assert service["Restart"] == "on-failure"
        assert service["StateDirectory"] == "leakfleet"
        assert service["NoNewPrivileges"] == "yes" and service["ProtectSystem"] == "strict"


def test_no_secret_in_example_config() -> None:
    text = (DEPLOY / "gateway.toml").read_text()
    assert "password =" not in text and "token =" not in text


# --------------------------------------------------------------------------- command lines


def _subcommands() -> list[str]:
    for action in build_parser()._actions:
        if isinstance(action, argparse._SubParsersAction):
            return sorted(action.choices)
    raise AssertionError("leakfleet has no subcommands")


_SUBCOMMANDS = "(?:" + "|".join(map(re.escape, _subcommands())) + ")"
# "leakfleet <subcommand> [word ...] --flag ...", up to a closing backtick or the end of the line
_INLINE = re.compile(rf"(?<![\w/-])leakfleet {_SUBCOMMANDS}(?: [a-z][\w-]*)* --[^`\n]*")


def _compose_commands(text: str) -> list[str]:
    """``command:`` values of compose.yaml: plain one-liners and ``>`` folded blocks."""
    out: list[str] = []
    lines = text.splitlines()
    for i, line in enumerate(lines):
        m = re.match(r"^(\s*)command:\s*(.*)$", line)
        if not m:
            continue
        indent, value = len(m.group(1)), m.group(2).strip()
        if value not in (">", ">-", "|", "|-"):
            out.append(value)
            continue
        block = []
        for nxt in lines[i + 1 :]:
            if nxt.strip() and len(nxt) - len(nxt.lstrip()) <= indent:
                break
            block.append(nxt.strip())
        out.append(" ".join(b for b in block if b))
    return out


def _unit_commands(path: Path) -> list[str]:
    unit = configparser.ConfigParser(strict=False, interpolation=None)
    unit.optionxform = str  # type: ignore[assignment,method-assign]
    unit.read(path)
    return [v for k, v in unit["Service"].items() if k.startswith("ExecStart")]


def _argv(command: str) -> list[str]:
    words = shlex.split(command)
    assert Path(words[0]).name == "leakfleet", command
    return words[1:]


def _deploy_command_lines() -> list[tuple[str, str]]:
    found: list[tuple[str, str]] = []
    for path in sorted(DEPLOY.rglob("*")):
        if path.is_file():
            found += [(path.name, m.group(0).strip()) for m in _INLINE.finditer(path.read_text())]
    found += [(f"{p.name} ExecStart", c) for p in sorted((DEPLOY / "systemd").glob("*.service"))
              for c in _unit_commands(p)]  # fmt: skip
    found += [
        ("compose.yaml command", c)
        for c in _compose_commands((DEPLOY / "compose" / "compose.yaml").read_text())
    ]
    return found


def test_deploy_files_hold_command_lines() -> None:
    where = {w for w, _ in _deploy_command_lines()}
    assert {"compose.yaml command", "leakfleet-gateway.service ExecStart",
            "leakfleet-dashboard.service ExecStart", "gateway.toml"} <= where  # fmt: skip


@pytest.mark.parametrize(("where", "command"), _deploy_command_lines())
def test_every_deploy_command_line_parses(where: str, command: str) -> None:
    """Each ``leakfleet ...`` line in deploy/ is accepted by the real parser (argparse exits 2
    on an unknown or missing flag), so the files follow the CLI as it changes."""
    args = build_parser().parse_args(_argv(command))
    assert callable(args.func), (where, command)
    # sink URLs are checked as the command itself checks them (ValueError on a bad one)
    sinks_from_cli(getattr(args, "mqtt", None), getattr(args, "influx", None))


def test_compose_dashboard_listens_inside_and_publishes_on_loopback() -> None:
    text = (DEPLOY / "compose" / "compose.yaml").read_text()
    dash = [c for c in _compose_commands(text) if " dashboard " in f" {c} "]
    assert len(dash) == 1
    args = build_parser().parse_args(_argv(dash[0]))
    assert args.address == "0.0.0.0" and args.port == 8501  # reachable by the port mapping
    service = text.split("\n  dashboard:\n", 1)[1].split("\n\n", 1)[0]
    ports = re.findall(r'^\s*-\s*"([^"]+)"\s*$', service.split("ports:", 1)[1], re.M)
    assert ports == ["127.0.0.1:8501:8501"]  # exposure beyond the host is a deliberate edit
    assert "dashboard/README.md" in service


def test_systemd_dashboard_stays_on_loopback() -> None:
    (command,) = _unit_commands(DEPLOY / "systemd" / "leakfleet-dashboard.service")
    args = build_parser().parse_args(_argv(command))
    assert args.address == "127.0.0.1"
