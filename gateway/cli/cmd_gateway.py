"""``leakfleet gateway``: run the gateway (or only check its configuration)."""

from __future__ import annotations

import argparse
import json
import logging
import sys
from datetime import UTC, datetime
from pathlib import Path

ORDER = 20

_LEVELS = ("debug", "info", "warning", "error")


def register(sub: argparse._SubParsersAction[argparse.ArgumentParser]) -> None:
    parser = sub.add_parser(
        "gateway",
        help="collect results from the configured stations into the journal",
        description=(
            "Poll and listen to every station in the config (serial lines, serial-over-TCP, "
            "Modbus TCP and RTU), turn what they report into canonical records with each "
            "station's profile, and commit them to the SQLite journal; lines that cannot be "
            "read go to its quarantine. Runs until SIGTERM or Ctrl-C, then stores everything "
            "it holds. The config is checked completely, every profile included, before "
            "anything starts."
        ),
        epilog="example: leakfleet gateway --config demo  (with: leakfleet sim --scenario demo)",
    )
    parser.add_argument(
        "--config", required=True, metavar="FILE|demo",
        help="gateway TOML config, or 'demo' for the shipped config of the simulated demo plant",
    )
    parser.add_argument(
        "--store", metavar="URL",
        help="journal URL, overriding the config's (default sqlite:///./leakfleet.db)",
    )
    parser.add_argument(
        "--profiles", metavar="DIR", action="append", default=[], type=Path,
        help="extra directory of station profiles (repeatable; searched before built-ins)",
    )
    parser.add_argument(
        "--log-level", choices=_LEVELS, default="info",
        help="log level (default info: one line per station state change, not per poll)",
    )
    parser.add_argument("--log-json", action="store_true", help="log one JSON object per line")
    parser.add_argument(
        "--check", action="store_true",
        help="validate the config and every profile, print a summary and exit",
    )
    # sinks helper: --mqtt / --influx (additive; see gateway/sinks/cli.py)
    from gateway.sinks.cli import add_sink_arguments

    add_sink_arguments(parser)
    parser.set_defaults(func=_run)


class _JsonFormatter(logging.Formatter):
    def format(self, record: logging.LogRecord) -> str:
        out = {
            "time": datetime.fromtimestamp(record.created, UTC).isoformat(),
            "level": record.levelname.lower(),
            "logger": record.name,
            "message": record.getMessage(),
        }
        if record.exc_info:
            out["exception"] = self.formatException(record.exc_info)
        return json.dumps(out, ensure_ascii=False)


def setup_logging(level: str, as_json: bool) -> None:
    handler = logging.StreamHandler(sys.stderr)
    handler.setFormatter(
        _JsonFormatter()
        if as_json
        else logging.Formatter("%(asctime)s %(levelname)-7s %(name)s: %(message)s")
    )
    root = logging.getLogger()
    root.handlers[:] = [handler]
    root.setLevel(level.upper())
    # pymodbus logs every retry and frame at its own levels; our drivers report what matters
    logging.getLogger("pymodbus").setLevel(logging.CRITICAL)


def _run(args: argparse.Namespace) -> int:
    from gateway.config import load_config

    config = load_config(args.config, store=args.store, profile_dirs=args.profiles)
    # sinks helper: switch sinks on from --mqtt / --influx (additive)
    from gateway.sinks.cli import with_cli_sinks

    config = with_cli_sinks(config, args.mqtt, args.influx)
    if args.check:
        from gateway.runtime import build_forwarders

        build_forwarders(config)  # each sink checks its own table
        print(f"{config.source}: ok: site {config.site!r}, gateway {config.gateway_id!r}, "
              f"journal {config.store}")
        for st in config.stations:
            print(f"  {st.id:<10} {st.line:<4} {st.profile.label:<16} {st.endpoint}  "
                  f"every {st.poll_interval_s:g} s, timeout {st.timeout_s:g} s")
        for name in config.sinks:
            print(f"  sink {name}")
        return 0
    setup_logging(args.log_level, args.log_json)
    from gateway.runtime import run_gateway

    return run_gateway(config)
