"""The ``leakfleet`` command line.

Each subcommand lives in a ``cmd_*.py`` module of this package exposing ``register(subparsers)``
(and optionally ``ORDER`` for its place in ``--help``); heavy imports happen inside the command's
handler so ``--help`` stays fast. A handler returns an exit code. User mistakes raise
``LeakfleetError`` (or ``ValueError``) and become one line on stderr with exit code 2, never a
traceback.
"""

from __future__ import annotations

import argparse
import importlib
import pkgutil
import re
import sys
from collections.abc import Sequence
from types import ModuleType
from typing import Any

from gateway import __version__
from gateway.errors import LeakfleetError

__all__ = ["build_parser", "main"]


def _command_modules() -> list[ModuleType]:
    modules = []
    for info in pkgutil.iter_modules(__path__):
        if info.name.startswith("cmd_"):
            modules.append(importlib.import_module(f"{__name__}.{info.name}"))
    return sorted(modules, key=lambda m: (getattr(m, "ORDER", 50), m.__name__))


class Parser(argparse.ArgumentParser):
    """An ArgumentParser that takes "-5C", "-0.3psi" or "-2e-3" as a value, not an option:
    plants quote temperatures and offsets below zero with their units (no option of ours
    starts with a digit, so nothing is lost)."""

    def __init__(self, *args: Any, **kwargs: Any) -> None:
        super().__init__(*args, **kwargs)
        self._negative_number_matcher = re.compile(r"^-\.?\d")


def build_parser() -> argparse.ArgumentParser:
    parser = Parser(
        prog="leakfleet",
        description=(
            "Collect pressure-decay leak-test results and calibrations from a fleet of stations "
            "(serial and Modbus), journal them, forward them, and analyse them."
        ),
    )
    parser.add_argument("--version", action="version", version=f"leakfleet {__version__}")
    sub = parser.add_subparsers(dest="command", metavar="COMMAND")
    for module in _command_modules():
        module.register(sub)
    return parser


def main(argv: Sequence[str] | None = None) -> int:
    parser = build_parser()
    args = parser.parse_args(argv)
    func = getattr(args, "func", None)
    if func is None:
        parser.print_help()
        return 2
    try:
        return int(func(args) or 0)
    except (LeakfleetError, ValueError) as exc:
        print(f"leakfleet {args.command}: error: {exc}", file=sys.stderr)
        return 2
    except KeyboardInterrupt:
        print("interrupted", file=sys.stderr)
        return 130
    except BrokenPipeError:
        return 0


if __name__ == "__main__":
    sys.exit(main())
