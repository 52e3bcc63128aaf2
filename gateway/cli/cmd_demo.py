"""``leakfleet demo``: the simulated demo plant, the gateway and the dashboard in one command.

One event loop runs the simulator's stations and the gateway (the shipped demo config, pointed
at wherever the stations actually listen); the dashboard is a Streamlit child process over the
same journal. Ctrl-C (or SIGTERM, or ``--seconds``) stops all three: the dashboard first, then
the gateway (which stores everything it holds), then the stations.

``--mqtt`` / ``--influx`` forward the demo's records exactly as ``leakfleet gateway`` would, so
a broker or database can be tried out against live-looking data; credentials come from the
environment only (see gateway/sinks/cli.py).
"""

from __future__ import annotations

import argparse
import asyncio
import contextlib
import dataclasses
import logging
import os
import signal
import socket
import sys
from pathlib import Path
from typing import TYPE_CHECKING, Any

if TYPE_CHECKING:
    from gateway.config import GatewayConfig

ORDER = 5

log = logging.getLogger(__name__)


def register(sub: argparse._SubParsersAction[argparse.ArgumentParser]) -> None:
    parser = sub.add_parser(
        "demo",
        help="run the simulated demo plant, the gateway and the dashboard together",
        description=(
            "Start the invented demo plant (Northmere Works: two lines, six simulated stations "
            "of all four station types), the gateway with its journal, and the dashboard; print "
            "the dashboard's address; stop all three cleanly on Ctrl-C. Simulated time runs "
            "--speed times faster than the clock, and the dashboard counts 'now' from the "
            "newest record, so the pages fill within a minute."
        ),
        epilog=(
            "examples: leakfleet demo   |   leakfleet demo --no-dashboard --seconds 30   |   "
            "LEAKFLEET_MQTT_PASSWORD=... leakfleet demo --mqtt mqtt://demo@127.0.0.1:1883"
        ),
    )
    parser.add_argument("--port", type=int, default=8501, help="dashboard port (default 8501)")
    parser.add_argument(
        "--speed", type=float, default=60.0,
        help="simulated seconds per real second (default 60)",
    )  # fmt: skip
    parser.add_argument(
        "--store", metavar="URL",
        help="journal URL (default: a fresh sqlite journal RUN_DIR/demo.db, emptied at start)",
    )  # fmt: skip
    parser.add_argument("--seconds", type=float, help="stop after this many seconds")
    parser.add_argument(
        "--faults", action="store_true",
        help="the plant with its faults on (link drops, line noise, cut and doubled lines, a "
        "clock offset, Modbus exceptions, torn blocks), so quarantine, gaps, offline stations "
        "and alarms show on the dashboard",
    )
    parser.add_argument(
        "--no-dashboard", action="store_true", help="run the plant and the gateway only"
    )
    parser.add_argument(
        "--run-dir", type=Path, default=Path("run"),
        help="directory for the stations' ptys, the default journal and logs (default ./run)",
    )  # fmt: skip
    parser.add_argument(
        "--free-ports", action="store_true",
        help="let the OS pick the stations' TCP ports (the demo's fixed ports may be taken)",
    )  # fmt: skip
    parser.add_argument(
        "--log-level", choices=("debug", "info", "warning", "error"), default="warning",
        help="gateway log level on stderr (default warning)",
    )  # fmt: skip
    from gateway.sinks.cli import add_sink_arguments

    add_sink_arguments(parser)
    parser.set_defaults(func=_run)


def _run(args: argparse.Namespace) -> int:
    from gateway.cli.cmd_dashboard import check_store_url
    from gateway.errors import ConfigError
    from gateway.sinks.cli import sinks_from_cli

    if args.speed <= 0:
        raise ConfigError(f"--speed must be > 0, got {args.speed}")
    if args.seconds is not None and args.seconds <= 0:
        raise ConfigError(f"--seconds must be > 0, got {args.seconds}")
    if not 0 < args.port < 65536:
        raise ConfigError(f"--port: expected 1..65535, got {args.port}")
    sinks_from_cli(args.mqtt, args.influx)  # a bad URL stops here, before any station starts
    run_dir: Path = args.run_dir
    if run_dir.exists() and not run_dir.is_dir():
        raise ConfigError(f"--run-dir {run_dir}: a file is in the way; give a directory")
    try:
        run_dir.mkdir(parents=True, exist_ok=True)
    except OSError as exc:
        raise ConfigError(f"--run-dir {run_dir}: cannot create it ({exc.strerror})") from None
    if args.store:
        check_store_url(args.store)
        if not args.store.startswith("sqlite:") and "://" in args.store:
            raise ConfigError(f"--store {args.store}: the demo's journal is SQLite "
                              "(sqlite:///path/demo.db); add InfluxDB as a sink with --influx")
        store = args.store
    else:
        db = run_dir / "demo.db"
        for leftover in (db, db.with_name("demo.db-wal"), db.with_name("demo.db-shm")):
            leftover.unlink(missing_ok=True)
        store = f"sqlite:///{db.resolve()}"
    if not args.no_dashboard:
        _check_port_free(args.port)
    logging.basicConfig(
        level=args.log_level.upper(), format="%(asctime)s %(levelname)-7s %(name)s: %(message)s"
    )
    logging.getLogger("pymodbus").setLevel(logging.CRITICAL)
    return asyncio.run(_demo(args, store, run_dir))


def _check_port_free(port: int) -> None:
    from gateway.errors import ConfigError

    with socket.socket(socket.AF_INET, socket.SOCK_STREAM) as s:
        try:
            s.bind(("127.0.0.1", port))
        except OSError:
            raise ConfigError(f"--port {port}: already in use; pick another with --port, or "
                              "add --free-ports if the stations' ports are taken too") from None


def demo_config(
    plant: Any, store: str, mqtt_url: str | None = None, influx_url: str | None = None
) -> GatewayConfig:
    """The shipped demo gateway config, with each station's endpoint where it really is and
    the sinks the command line asked for."""
    from gateway.config import load_config
    from gateway.sinks.cli import with_cli_sinks

    config = load_config("demo", store=store)
    stations = []
    for st in config.stations:
        ep = plant.endpoints[st.id]
        endpoint = f"tcp://{ep.host}:{ep.port}" if ep.transport == "tcp" else str(ep.path)
        stations.append(dataclasses.replace(st, endpoint=endpoint))
    config = dataclasses.replace(config, stations=tuple(stations))
    return with_cli_sinks(config, mqtt_url, influx_url)


async def _wait_http(
    port: int, proc: asyncio.subprocess.Process, stop: asyncio.Event, timeout: float
) -> bool:
    """Until the dashboard answers its health check (False if it died or took too long)."""
    request = f"GET /_stcore/health HTTP/1.0\r\nHost: 127.0.0.1:{port}\r\n\r\n".encode()
    loop = asyncio.get_running_loop()
    deadline = loop.time() + timeout
    while loop.time() < deadline and proc.returncode is None and not stop.is_set():
        with contextlib.suppress(OSError, TimeoutError):
            reader, writer = await asyncio.wait_for(asyncio.open_connection("127.0.0.1", port), 1.0)
            try:
                writer.write(request)
                await asyncio.wait_for(writer.drain(), 1.0)
                answer = await asyncio.wait_for(reader.read(4096), 2.0)
            finally:
                writer.close()
                with contextlib.suppress(OSError):
                    await writer.wait_closed()
            if b" 200 " in answer.split(b"\r\n", 1)[0]:
                return True
        await asyncio.sleep(0.2)
    return False


async def _stop_process(proc: asyncio.subprocess.Process) -> None:
    if proc.returncode is not None:
        return
    proc.terminate()
    try:
        await asyncio.wait_for(proc.wait(), 10)
    except TimeoutError:
        proc.kill()
        await proc.wait()


async def _demo(args: argparse.Namespace, store: str, run_dir: Path) -> int:
    from gateway import clock
    from gateway.cli.cmd_dashboard import streamlit_command
    from gateway.errors import LeakfleetError
    from gateway.runtime import Runtime
    from sim.run import Plant
    from sim.scenario import load_scenario

    scenario = load_scenario("demo")
    if args.faults:
        scenario = scenario.with_faults(True)
    sim_dir = run_dir / "sim"
    scenario = (
        scenario.with_free_ports(sim_dir)
        if args.free_ports
        else dataclasses.replace(scenario, run_dir=sim_dir)
    )
    if store.startswith("sqlite:"):
        _record_study(scenario, store)
    stop = asyncio.Event()
    loop = asyncio.get_running_loop()
    for sig in (signal.SIGINT, signal.SIGTERM):
        loop.add_signal_handler(sig, stop.set)
    dash: asyncio.subprocess.Process | None = None
    failed = False
    try:
        async with Plant(scenario, speed=args.speed, keep_truth=False) as plant:
            # the gateway and its alarm rules live on the plant's fast clock, as the
            # dashboard does (clock "data"): receipt and station stamps agree
            assert plant.clock is not None
            os.environ["LEAKFLEET_CLOCK"] = "data"  # for the alarm rules' own process
            with clock.use_clock(plant.clock.datetime):
                config = demo_config(plant, store, args.mqtt, args.influx)
                from gateway.runtime import build_forwarders

                build_forwarders(config)  # each sink checks its own table before anything runs
                runtime = Runtime(config)
                async with asyncio.TaskGroup() as tg:
                    gateway = tg.create_task(runtime.run(stop), name="gateway")
                    print(f"demo: {scenario.site}, {len(plant.endpoints)} stations at "
                          f"{args.speed:g}x, journal {store}", flush=True)  # fmt: skip
                    for name in config.sinks:
                        print(f"  forwarding to sink {name}", flush=True)
                    if not args.no_dashboard:
                        argv, env = streamlit_command(
                            store, port=args.port, config="demo", clock="data"
                        )
                        log_file = (run_dir / "dashboard.log").open("wb")
                        dash = await asyncio.create_subprocess_exec(
                            *argv, env=env, stdout=log_file, stderr=asyncio.subprocess.STDOUT,
                            stdin=asyncio.subprocess.DEVNULL,
                        )  # fmt: skip
                        log_file.close()
                        if await _wait_http(args.port, dash, stop, 60):
                            print(f"dashboard: http://127.0.0.1:{args.port}  (Ctrl-C stops)",
                                  flush=True)  # fmt: skip
                        else:
                            failed = not stop.is_set()
                            if failed:
                                print(f"dashboard did not start; see {run_dir / 'dashboard.log'}",
                                      file=sys.stderr, flush=True)  # fmt: skip
                    # until Ctrl-C / SIGTERM, --seconds, or the dashboard or gateway ending
                    watchers: list[asyncio.Task[Any]] = [tg.create_task(stop.wait())]
                    if dash is not None:
                        watchers.append(tg.create_task(dash.wait()))
                    await asyncio.wait([*watchers, gateway], timeout=args.seconds,
                                       return_when=asyncio.FIRST_COMPLETED)  # fmt: skip
                    for w in watchers:
                        w.cancel()
                    if dash is not None:
                        await _stop_process(dash)
                    stop.set()
    except OSError as exc:
        raise LeakfleetError(f"cannot start the demo: {exc}") from None
    finally:
        if dash is not None and dash.returncode is None:
            await _stop_process(dash)
        for sig in (signal.SIGINT, signal.SIGTERM):
            loop.remove_signal_handler(sig)
    _summary(store)
    return 1 if failed else 0


def _record_study(scenario: Any, store: str) -> None:
    """A long-cycle calibration study of the first station with its pressure traces, so the
    demo's trace viewer and back-down map have something to show."""
    from gateway.store import open_journal
    from sim.trace_study import study

    st = scenario.stations[0]
    program = next(iter(st.programs.values()))
    with open_journal(store) as journal:
        journal.write(study(scenario, st, program, masters=12, standards=4, stabilise_s=20.0,
                            test_s=20.0, interval_s=0.2))


def _summary(store: str) -> None:
    from gateway.store import open_store

    try:
        s = open_store(store)
    except Exception as exc:  # the summary is a courtesy: never fail the demo for it
        print(f"stopped (no summary: {exc})", file=sys.stderr)
        return
    try:
        counts = s.verdict_counts(by=("station",))
        cals = s.calibrations()
        per: dict[str, int] = (
            {str(k): int(v) for k, v in counts.groupby("station")["n"].sum().items()}
            if not counts.empty
            else {}
        )
        print(f"stopped: {sum(per.values())} results, {len(cals)} calibrations in {store}",
              flush=True)  # fmt: skip
        for station, n in per.items():
            print(f"  {station}: {n} results", flush=True)
    finally:
        s.close()
