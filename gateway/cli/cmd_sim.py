"""``leakfleet sim``: run a plant of simulated stations (the ``sim`` package) until told to stop."""

from __future__ import annotations

import argparse
import asyncio
import contextlib
import signal
import sys
from pathlib import Path

ORDER = 30


def register(sub: argparse._SubParsersAction[argparse.ArgumentParser]) -> None:
    parser = sub.add_parser(
        "sim",
        help="run simulated leak-test stations (serial and Modbus) from a scenario",
        description=(
            "Start the stations of a scenario: each serves its protocol on a loopback TCP port or "
            "a pseudo-terminal (published as <run dir>/<station>.tty). Prints every station's "
            "endpoint once ready, then runs until --seconds have passed or Ctrl-C. With --truth, "
            "writes every result, calibration and injected garbage line as JSON lines."
        ),
    )
    parser.add_argument(
        "--scenario",
        default="demo",
        help="built-in scenario name (demo, demo-faults) or a scenario TOML file (default demo)",
    )
    parser.add_argument(
        "--speed",
        type=float,
        default=60.0,
        help="simulated seconds per wall-clock second (default 60: a minute per second)",
    )
    parser.add_argument(
        "--seconds",
        type=float,
        help="stop after this many wall-clock seconds (default: run until Ctrl-C)",
    )
    parser.add_argument("--truth", type=Path, help="write the truth log (JSON lines) to this file")
    parser.add_argument(
        "--faults", action="store_true", help="switch on the faults the scenario defines"
    )
    parser.add_argument(
        "--run-dir", type=Path, help="directory for the pty symlinks (default: the scenario's)"
    )
    parser.add_argument(
        "--free-ports", action="store_true",
        help="let the system pick free TCP ports instead of the scenario's fixed ones (the "
        "endpoints are printed at start)",
    )
    parser.set_defaults(func=_run)
    # `leakfleet sim backfill ...`; plain `leakfleet sim --scenario ...` runs the plant as before
    from gateway.cli import sim_backfill, sim_study

    actions = parser.add_subparsers(title="other actions", metavar="{backfill,study}")
    sim_backfill.register(actions)
    sim_study.register(actions)


def _run(args: argparse.Namespace) -> int:
    import dataclasses

    from gateway.errors import ConfigError
    from sim.scenario import load_scenario

    if args.speed <= 0:
        raise ConfigError(f"--speed must be > 0, got {args.speed}")
    if args.seconds is not None and args.seconds <= 0:
        raise ConfigError(f"--seconds must be > 0, got {args.seconds}")
    scenario = load_scenario(args.scenario)
    if args.run_dir is not None:
        scenario = dataclasses.replace(scenario, run_dir=args.run_dir)
    if args.faults:
        scenario = scenario.with_faults(True)
    if args.free_ports:
        scenario = scenario.with_free_ports()
    return asyncio.run(_serve(scenario, args.speed, args.seconds, args.truth))


async def _serve(scenario: object, speed: float, seconds: float | None, truth: Path | None) -> int:
    from gateway.errors import LeakfleetError
    from sim.run import Plant
    from sim.scenario import Scenario

    assert isinstance(scenario, Scenario)
    stop = asyncio.Event()
    loop = asyncio.get_running_loop()
    for sig in (signal.SIGINT, signal.SIGTERM):
        loop.add_signal_handler(sig, stop.set)
    try:
        async with Plant(scenario, speed=speed, truth_path=truth, keep_truth=False) as plant:
            width = max(len(name) for name in plant.endpoints)
            for name, endpoint in plant.endpoints.items():
                print(f"{name:<{width}}  {endpoint.type:<8}  {endpoint.transport}  {endpoint}")
            faults = "on" if plant.scenario.faults_enabled else "off"
            print(
                f"ready: {scenario.site}, {len(plant.endpoints)} stations, speed {speed:g}x, "
                f"faults {faults}, simulated start {plant.start.isoformat()}",
                flush=True,
            )
            with contextlib.suppress(TimeoutError):
                await asyncio.wait_for(stop.wait(), seconds)
    except OSError as exc:
        hint = ("; another plant may be running (stop it, or add --free-ports and point the "
                "gateway at the endpoints printed)") if "in use" in str(exc) else ""
        raise LeakfleetError(f"cannot start the stations of {scenario.source}: {exc}{hint}"
                             ) from None
    finally:
        for sig in (signal.SIGINT, signal.SIGTERM):
            loop.remove_signal_handler(sig)
    print("stopped", file=sys.stderr)
    return 0
