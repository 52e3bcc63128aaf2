"""Try a profile against a live station: the gateway's own drivers, read-only, for N records.

``leakfleet profile check PROFILE --endpoint URL`` runs the driver the gateway would run for
the profile (stream, request, Modbus ring or last-result block) with the profile's
acknowledge writes taken out, unless the person allows them: a station under test is never
written to by surprise. It stops after N records (accepted or rejected), or at the deadline,
and says in one line why nothing came when nothing did (refused connection, silence, a Modbus
exception such as a wrong device id).
"""

from __future__ import annotations

import asyncio
import contextlib
import dataclasses
from collections.abc import Sequence
from dataclasses import dataclass, field

from gateway.drivers.base import Item, Pacing, StationTarget
from gateway.profiles import Profile, StationContext
from gateway.records import CalibrationEvent, Rejected, StationStatus, TestResult

__all__ = ["LiveResult", "read_only", "read_station"]


def read_only(profile: Profile) -> Profile:
    """The profile without any acknowledge write (Modbus ring or last-result block)."""
    m = profile.modbus
    if m is None:
        return profile
    latest = m.latest.model_copy(update={"ack": ()}) if m.latest is not None else None
    return dataclasses.replace(profile, modbus=dataclasses.replace(m, acknowledge=None,
                                                                   latest=latest))


@dataclass
class LiveResult:
    records: list[TestResult | CalibrationEvent | Rejected] = field(default_factory=list)
    problems: list[str] = field(default_factory=list)  # what the driver reported, in order
    timed_out: bool = False


class _Collector:
    def __init__(self, want: int) -> None:
        self.want = want
        self.result = LiveResult()
        self.done = asyncio.Event()
        self._seen: set[str] = set()

    @property
    def accepting(self) -> bool:
        return True

    async def put(self, items: Sequence[Item]) -> None:
        for item in items:
            if isinstance(item, StationStatus):
                if item.detail:
                    self.result.problems.append(item.detail)
                continue
            if not isinstance(item, (TestResult, CalibrationEvent, Rejected)):
                continue
            key = getattr(item, "record_id", None) or f"{item.raw}|{len(self.result.records)}"
            if key in self._seen:
                continue  # without the acknowledge the station shows its block again
            self._seen.add(key)
            self.result.records.append(item)
        if len(self.result.records) >= self.want:
            self.done.set()


async def read_station(profile: Profile, endpoint: str, ctx: StationContext, *,
                       records: int, seconds: float, timeout_s: float, poll_interval_s: float,
                       allow_writes: bool = False, options: dict[str, object] | None = None
                       ) -> LiveResult:
    """Run the profile's driver against ``endpoint`` until ``records`` items or ``seconds``."""
    from gateway.drivers.modbus import run_modbus_bus
    from gateway.drivers.serial import run_request_bus, run_stream_station

    target = StationTarget(
        station=ctx.station, endpoint=endpoint,
        profile=profile if allow_writes else read_only(profile), context=ctx,
        poll_interval_s=poll_interval_s, timeout_s=timeout_s, timeout_explicit=True,
        options=dict(options or {}),
    )
    pacing = Pacing(backoff_initial_s=0.2, backoff_max_s=1.0, offline_after=1)
    target.health.offline_after = 1  # a check reports the first failure, not the third
    out = _Collector(records)
    if profile.modbus is not None:
        run = run_modbus_bus([target], out, pacing)
    else:
        assert profile.serial is not None
        run = (run_stream_station(target, out, pacing) if profile.serial.mode == "stream"
               else run_request_bus([target], out, pacing))
    task = asyncio.ensure_future(run)
    try:
        await asyncio.wait_for(out.done.wait(), seconds)
    except TimeoutError:
        out.result.timed_out = True
    finally:
        task.cancel()
        with contextlib.suppress(asyncio.CancelledError):
            await task
    last = target.health.last_error
    if last and (not out.result.problems or out.result.problems[-1] != last):
        out.result.problems.append(last)
    exceptions = {k: n for k, n in target.health.counters.items() if k.startswith("exception_")}
    if exceptions and not out.result.records:
        code, n = max(exceptions.items(), key=lambda kv: kv[1])
        # exception codes: Modbus application protocol v1.1b3, section 7
        hint = {"exception_11": " (target device failed to respond: wrong device id?)",
                "exception_10": " (gateway path unavailable: wrong device id?)",
                "exception_04": " (server device failure: a wrong device id on some servers, "
                                "or a station fault)",
                "exception_02": " (illegal data address: wrong register map?)",
                "exception_01": " (illegal function: holding vs input registers?)"}.get(code, "")
        out.result.problems.append(f"Modbus exception {int(code[-2:])} on {n} read(s){hint}")
    return out.result
