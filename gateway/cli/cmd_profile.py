"""``leakfleet profile``: list, show and check station profiles (the integrator's tools)."""

from __future__ import annotations

import argparse
import json
import sys
from pathlib import Path
from typing import Any

ORDER = 30

_SKIP = {"station", "line", "received_at", "raw", "profile", "schema", "kind", "record_id"}


def register(sub: argparse._SubParsersAction[argparse.ArgumentParser]) -> None:
    parser = sub.add_parser(
        "profile",
        help="list, show and check station profiles",
        description=(
            "Station profiles describe how a station type talks and how its fields map to "
            "canonical records. 'check' runs a profile over a captured sample and shows every "
            "record and every rejected line with the reason."
        ),
    )
    cmds = parser.add_subparsers(dest="profile_command", metavar="ACTION", required=True)

    p = cmds.add_parser("list", help="list the built-in profiles (and those in --profiles DIR)",
                        description="List profiles: name, version, transport, description.")
    _dirs(p)
    p.add_argument("--json", action="store_true", help="print one JSON document")
    p.set_defaults(func=_list)

    p = cmds.add_parser(
        "draft", help="propose a starting profile from a serial capture",
        description="Read a serial capture (from 'leakfleet capture' or any terminal log) and "
        "write a commented TOML profile with what can be read off the bytes: line end, check "
        "values or STX/ETX frames, separator or key/value pairs, header row, decimal mark, "
        "date and time formats, which lines are results and which calibrations, the verdict "
        "codes, the cycle counter, part ids, units in the data. What a capture cannot tell "
        "(which number is the leak rate, in which unit; the query of a station that must be "
        "asked) is marked CHOICE for you to fill in. Then run 'leakfleet profile check' on "
        "the same capture. Fixed-width printouts are not drafted (no separator to find).")
    p.add_argument("capture", metavar="CAPTURE", help="the capture file")
    p.add_argument("-o", "--out", type=Path, metavar="FILE",
                   help="write the draft here (default: print it)")
    p.add_argument("--force", action="store_true", help="overwrite --out if it exists")
    p.add_argument("--name", default="my-station",
                   help="profile name (lower-case letters, digits, '.', '_', '-')")
    p.add_argument("--json", action="store_true",
                   help="print the draft, its notes and the choices left as one JSON document")
    p.set_defaults(func=_draft)

    p = cmds.add_parser(
        "schema", help="print the JSON Schema of profile files (or of the gateway config)",
        description="Print the JSON Schema the loader checks files against, for editors that "
        "complete and check TOML as it is typed (e.g. a first line '#:schema "
        "schemas/profile.schema.json'). The repository ships both under schemas/.")
    p.add_argument("--config", action="store_true",
                   help="the gateway config's schema instead of the profiles'")
    p.set_defaults(func=_schema)

    p = cmds.add_parser("show", help="print a profile's TOML and where it comes from",
                        description="Print a profile file (built-in name, name in --profiles "
                        "DIR, or a path).")
    p.add_argument("profile", metavar="PROFILE", help="profile name or path to a .toml file")
    _dirs(p)
    p.set_defaults(func=_show)

    p = cmds.add_parser(
        "check",
        help="parse a captured sample with a profile",
        description=(
            "Parse SAMPLE with PROFILE and print each canonical record and each rejected "
            "line with its line number and reason, then a summary. Beside each value: the raw "
            "text or registers it came from and what the profile applied (decimal mark, "
            "scale, unit, code table, bits), or that the plant's config supplied it. "
            "SAMPLE is the station's "
            "text output (serial profiles) or a register dump in JSON (Modbus profiles, "
            "format in gateway/profiles/README.md). Exit code 0 when the sample was parsed "
            "(even with rejects), 2 for an invalid profile or unreadable sample."
        ),
    )
    p.add_argument("profile", metavar="PROFILE", help="profile name or path to a .toml file")
    p.add_argument("sample", metavar="SAMPLE", nargs="?",
                   help="captured sample file (or --endpoint for a live station)")
    p.add_argument("--endpoint", metavar="URL",
                   help="read a live station instead: tcp://host:port (serial device server "
                        "or Modbus TCP), a tty path or socket://host:port; read-only unless "
                        "--allow-writes")
    p.add_argument("--records", type=int, default=5, metavar="N",
                   help="with --endpoint: stop after N records (default 5)")
    p.add_argument("--seconds", type=float, default=60.0, metavar="S",
                   help="with --endpoint: give up after S seconds (default 60)")
    p.add_argument("--timeout", type=float, default=2.0, metavar="S",
                   help="with --endpoint: how long one answer may take (default 2)")
    p.add_argument("--poll", type=float, default=0.5, metavar="S",
                   help="with --endpoint: time between polls (default 0.5)")
    p.add_argument("--device-id", type=int, default=None, metavar="N",
                   help="with --endpoint: the Modbus device id, if not the profile's")
    p.add_argument("--allow-writes", action="store_true",
                   help="with --endpoint: let the profile's acknowledge writes happen (off by "
                        "default: a check never writes to a station)")
    p.add_argument("--json", action="store_true", help="print one JSON document")
    p.add_argument("--station", default="SAMPLE", help="station id to put on records")
    p.add_argument("--line", default="L1", help="production line to put on records")
    p.add_argument("--timezone", default="UTC",
                   help="station time zone for timestamps without an offset (default UTC)")
    p.add_argument("--program", action="append", default=[], metavar="N=NAME",
                   help="Modbus program number to name, e.g. --program 1=HX-210 (repeatable)")
    p.add_argument("--address", type=int, default=None, metavar="N",
                   help="the station's address on a shared line: answers naming another "
                        "address are rejected, as the gateway does")
    p.add_argument("--brief", dest="origins", action="store_false",
                   help="values only, without where each came from")
    _dirs(p)
    p.set_defaults(func=_check)


def _dirs(p: argparse.ArgumentParser) -> None:
    p.add_argument("--profiles", action="append", default=[], metavar="DIR", type=Path,
                   help="directory with more profile files (repeatable)")


def _draft(args: argparse.Namespace) -> int:
    import re

    from gateway.workbench.draft import draft_profile

    if not re.fullmatch(r"[a-z0-9][a-z0-9._-]*", args.name):
        raise ValueError(f"--name: expected lower-case letters, digits, '.', '_' or '-', got "
                         f"{args.name!r}")
    try:
        data = Path(args.capture).read_bytes()
    except OSError as exc:
        raise ValueError(f"{args.capture}: cannot read the capture: {exc.strerror or exc}"
                         ) from None
    try:
        draft = draft_profile(data, args.name)
    except ValueError as exc:
        raise ValueError(f"{args.capture}: {exc}") from None
    if args.out is not None:
        if args.out.exists() and not args.force:
            raise ValueError(f"--out: {args.out} exists (use --force to overwrite)")
        args.out.write_text(draft.toml, encoding="utf-8")
    if args.json:
        print(json.dumps({**draft.to_json(), "out": str(args.out) if args.out else None},
                         indent=2))
        return 0
    if args.out is None:
        print(draft.toml, end="")
    stream = sys.stderr if args.out is None else sys.stdout
    print("\nfound:", file=stream)
    for note in draft.notes:
        print(f"  - {note}", file=stream)
    print("left to you (CHOICE in the file):", file=stream)
    for choice in draft.choices:
        print(f"  - {choice}", file=stream)
    where = args.out or "THE-DRAFT.toml"
    print(f"next: leakfleet profile check {where} {args.capture}", file=stream)
    return 0


def _schema(args: argparse.Namespace) -> int:
    if args.config:
        from gateway.config_schema import config_json_schema

        print(json.dumps(config_json_schema(), indent=2, ensure_ascii=False))
    else:
        from gateway.profiles.schema import profile_json_schema

        print(json.dumps(profile_json_schema(), indent=2, ensure_ascii=False))
    return 0


def _list(args: argparse.Namespace) -> int:
    from gateway.errors import ConfigError
    from gateway.profiles import builtin_profiles, load_profile

    names = list(builtin_profiles())
    for directory in args.profiles:
        names += [p.stem for p in sorted(Path(directory).glob("*.toml")) if p.stem not in names]
    profiles = []
    bad: list[str] = []
    for n in names:  # one broken file must not hide the good ones
        try:
            profiles.append(load_profile(n, args.profiles))
        except ConfigError as exc:
            bad.append(str(exc))
    if args.json:
        print(json.dumps([{"name": p.name, "version": p.version, "transport": p.transport,
                           "description": p.description, "source": p.source}
                          for p in profiles], indent=2))
        return 0
    width = max((len(p.name) for p in profiles), default=4)
    for p in profiles:
        print(f"{p.name:<{width}}  {p.version:<6}  {p.transport:<6}  {p.description}")
    for reason in bad:
        print(f"not loaded: {reason}", file=sys.stderr)
    return 1 if bad else 0


def _show(args: argparse.Namespace) -> int:
    from gateway.profiles import load_profile

    profile = load_profile(args.profile, args.profiles)
    print(f"# {profile.label}  ({profile.source})")
    print(Path(profile.source).read_text(encoding="utf-8"), end="")
    return 0


def _programs(values: list[str]) -> dict[int, str]:
    out = {}
    for value in values:
        number, sep, name = value.partition("=")
        if not sep or not number.strip().isdigit() or not name.strip():
            raise ValueError(f"--program: expected N=NAME such as 1=HX-210, got {value!r}")
        out[int(number)] = name.strip()
    return out


def _fmt(value: Any) -> str:
    if isinstance(value, float):
        return f"{value:.6g}"
    return str(value)


def _check(args: argparse.Namespace) -> int:
    from datetime import UTC, datetime
    from zoneinfo import ZoneInfo, ZoneInfoNotFoundError

    from gateway.errors import ConfigError
    from gateway.profiles import StationContext, load_profile
    from gateway.profiles.check import check_sample
    from gateway.records import Rejected

    if args.timezone.upper() != "UTC":
        try:
            ZoneInfo(args.timezone)
        except (ZoneInfoNotFoundError, ValueError):
            raise ValueError(f"--timezone: expected an IANA time zone, got {args.timezone!r}"
                             ) from None
    if (args.sample is None) == (args.endpoint is None):
        raise ValueError("give a SAMPLE file or --endpoint URL (one of the two)")
    profile = load_profile(args.profile, args.profiles)
    ctx = StationContext(args.station, args.line, args.timezone, _programs(args.program),
                         address=args.address, traces=True)
    if args.endpoint is not None:
        from gateway.cli.profile_live import check_endpoint

        entries = check_endpoint(args, profile, ctx)
        args.sample = args.endpoint
    else:
        try:
            data = Path(args.sample).read_bytes()
        except OSError as exc:
            raise ConfigError(f"{args.sample}: cannot read sample: {exc.strerror or exc}"
                              ) from None
        entries = check_sample(profile, data, ctx, datetime.now(UTC), args.sample)
    counts = {"result": 0, "calibration": 0, "trace": 0, "rejected": 0}
    for e in entries:
        if isinstance(e.item, Rejected):
            counts["rejected"] += 1
        elif e.item is not None:
            counts[e.item.kind] += 1
    if args.json:
        doc = {
            "profile": profile.label, "sample": args.sample, "station": ctx.station,
            "line": ctx.line, "timezone": ctx.timezone,
            "entries": [
                {"line_no": e.line_no, "where": e.where,
                 "kind": "rejected" if isinstance(e.item, Rejected)
                 else (e.item.kind if e.item is not None else "note"),
                 "record": None if e.item is None else e.item.to_dict(), "note": e.note,
                 "origins": {o.field: o.to_dict() for o in e.origins}}
                for e in entries
            ],
            "summary": {"results": counts["result"], "calibrations": counts["calibration"],
                        "traces": counts["trace"], "rejected": counts["rejected"]},
        }
        print(json.dumps(doc, indent=2))
        return 0
    print(f"profile {profile.label}   sample {args.sample}   station {ctx.station} / "
          f"{ctx.line}   time zone {ctx.timezone}")
    where_w = max((len(e.where) for e in entries), default=4)
    for e in entries:
        print()
        if e.item is None:
            print(f"{e.where:<{where_w}}  {'note':<11}  {e.note}")
        elif isinstance(e.item, Rejected):
            print(f"{e.where:<{where_w}}  {'REJECTED':<11}  {e.item.reason}")
            print(f"{'':<{where_w}}  {'':<11}  raw: {e.item.raw[:200]!r}")
        else:
            data_ = e.item.to_dict()
            if "pressures_pa" in data_:  # a curve: its size and ends, not every sample
                p = data_["pressures_pa"]
                data_["pressures_pa"] = f"{len(p)} samples, {p[0]:g} .. {max(p):g} .. {p[-1]:g} Pa"
            print(f"{e.where:<{where_w}}  {e.item.kind:<11}  id {e.item.record_id}")
            names = [k for k in data_ if k not in _SKIP and data_[k] not in (None, "")]
            origins = {o.field: o for o in e.origins}
            absent = [k for k in origins if k not in names and k in data_]
            key_w = max(len(k) for k in [*names, *absent])
            val_w = max((len(_fmt(data_[k])) for k in names), default=1)
            for k in [*names, *absent]:
                value = _fmt(data_[k]) if k in names else "(absent)"
                o = origins.get(k)
                tail = f"  <- {o.raw}  [{o.applied}]" if o is not None and args.origins else ""
                print(f"{'':<{where_w}}  {'':<11}  {k:<{key_w}}  {value:<{val_w}}{tail}")
    print()
    curves = f"{counts['trace']} pressure curves, " if counts["trace"] else ""
    print(f"summary: {counts['result']} results, {counts['calibration']} calibrations, "
          f"{curves}{counts['rejected']} rejected")
    return 0
