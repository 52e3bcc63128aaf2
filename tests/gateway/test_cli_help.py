"""Every command's --help reads as written: no literal '%%', a description for each."""

from __future__ import annotations

import argparse

from gateway.cli import build_parser


def _parsers(parser: argparse.ArgumentParser, path: str = "leakfleet"
             ) -> list[tuple[str, argparse.ArgumentParser]]:
    out = [(path, parser)]
    for action in parser._actions:
        if isinstance(action, argparse._SubParsersAction):
            for name, sub in action.choices.items():
                out += _parsers(sub, f"{path} {name}")
    return out


def test_help_texts_have_no_doubled_percent_signs() -> None:
    found = _parsers(build_parser())
    assert len(found) > 30
    for path, parser in found:
        text = parser.format_help()
        assert "%%" not in text, path
