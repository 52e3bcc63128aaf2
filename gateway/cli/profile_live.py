"""``leakfleet profile check PROFILE --endpoint URL``: the live side of the profile check."""

from __future__ import annotations

import argparse
import asyncio
import sys

from gateway.profiles import Profile, StationContext
from gateway.profiles.check import Entry

__all__ = ["check_endpoint"]


def check_endpoint(args: argparse.Namespace, profile: Profile, ctx: StationContext
                   ) -> list[Entry]:
    """Read N records from the station; a one-line ValueError when none came."""
    from gateway.workbench.live import read_station

    for name, value, low in (("--records", args.records, 1), ("--seconds", args.seconds, 0.1),
                             ("--timeout", args.timeout, 0.05), ("--poll", args.poll, 0.01)):
        if not value >= low:
            raise ValueError(f"{name}: expected at least {low}, got {value}")
    options: dict[str, object] = {}
    if args.device_id is not None:
        if profile.modbus is None:
            raise ValueError("--device-id: only for Modbus profiles")
        if not 0 <= args.device_id <= 255:
            raise ValueError(f"--device-id: expected 0..255, got {args.device_id}")
        options["device_id"] = args.device_id
    result = asyncio.run(read_station(
        profile, args.endpoint, ctx, records=args.records, seconds=args.seconds,
        timeout_s=args.timeout, poll_interval_s=args.poll, allow_writes=args.allow_writes,
        options=options))
    if not result.records:
        why = result.problems[-1] if result.problems else (
            "the station sent nothing (a station that only answers queries needs a request "
            "profile; check the endpoint and the line settings)")
        raise ValueError(f"{args.endpoint}: no record within {args.seconds:g} s: {why}")
    if result.timed_out:
        note = f"stopped at the deadline with {len(result.records)} of {args.records} records"
        latest = profile.modbus.latest if profile.modbus is not None else None
        if latest is not None and latest.ack and not args.allow_writes:
            note += ("; this station shows its next result only after the acknowledge, which "
                     "a check does not write without --allow-writes")
        print(f"note: {note}", file=sys.stderr)
    return [Entry(i, f"record {i}", item) for i, item in enumerate(result.records, start=1)]
