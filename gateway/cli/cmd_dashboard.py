"""``leakfleet dashboard``: serve the Streamlit dashboard over a store."""

from __future__ import annotations

import argparse
import os
import subprocess
import sys
from collections.abc import Mapping, Sequence
from pathlib import Path

ORDER = 40

_APP = Path(__file__).resolve().parents[2] / "dashboard" / "app.py"
_SCHEMES = ("sqlite", "influxdb", "influxdb2")


def register(sub: argparse._SubParsersAction[argparse.ArgumentParser]) -> None:
    parser = sub.add_parser(
        "dashboard",
        help="serve the dashboard (fleet live, yield, limits, calibration, gauge, quality, data)",
        description=(
            "Serve the web dashboard over a store: the gateway's SQLite journal (read-only) or "
            "InfluxDB. Listens on 127.0.0.1 unless told otherwise; before exposing it beyond "
            "the line PC, set up a login (dashboard/README.md). Runs until Ctrl-C."
        ),
        epilog="example: leakfleet dashboard --store sqlite:///./leakfleet.db --config demo",
    )
    parser.add_argument(
        "--store", metavar="URL",
        help="sqlite:///path/file.db (or a bare path), influxdb://host:8086/db, "
             "influxdb2://host:8086?org=..&bucket=..",
    )  # fmt: skip
    parser.add_argument("--port", type=int, default=8501, help="TCP port (default 8501)")
    parser.add_argument(
        "--address", default="127.0.0.1",
        help="address to listen on (default 127.0.0.1, this machine only)",
    )  # fmt: skip
    parser.add_argument(
        "--config", metavar="FILE|demo",
        help="gateway/plant TOML config for site name, time zone, shifts and leak standards",
    )  # fmt: skip
    parser.add_argument(
        "--clock", choices=("wall", "data"), default="wall",
        help="'now' on the pages: this machine's clock (default), or the newest record's time "
        "(for a simulated plant running faster than real time, or a history replayed)",
    )
    parser.add_argument(
        "--no-login-ok", action="store_true",
        help="serve on a non-loopback address without a login (refused otherwise: anyone on "
        "the network would see the plant's data)",
    )
    parser.add_argument(
        "--hash-password", action="store_true",
        help="read a password from stdin and print the salted hash for the dashboard's "
        "secrets (.streamlit/secrets.toml, [leakfleet] password_hash = ...), then exit",
    )
    parser.set_defaults(func=_run)


#: secrets of the gateway's sinks that the dashboard never needs (the InfluxDB ones only when
#: it reads an InfluxDB store)
_SINK_SECRETS = ("LEAKFLEET_MQTT_PASSWORD", "LEAKFLEET_INFLUX_TOKEN", "LEAKFLEET_INFLUX_PASSWORD")


def check_address(address: str, port: int) -> None:
    """An address this machine can listen on, or one line saying why not."""
    import socket

    try:
        infos = socket.getaddrinfo(address, port, type=socket.SOCK_STREAM)
    except (socket.gaierror, UnicodeError) as exc:
        raise ValueError(f"--address {address!r}: not an address of this machine ({exc})") from None
    family, _, _, _, sockaddr = infos[0]
    with socket.socket(family, socket.SOCK_STREAM) as s:
        try:
            s.bind((sockaddr[0], 0))
        except OSError as exc:
            raise ValueError(f"--address {address!r}: cannot listen there "
                             f"({exc.strerror or exc})") from None


def is_loopback(address: str) -> bool:
    import ipaddress
    import socket

    try:
        return all(ipaddress.ip_address(info[4][0]).is_loopback
                   for info in socket.getaddrinfo(address, None))
    except (OSError, ValueError):
        return False


def login_configured(cwd: Path | None = None) -> bool:
    """A login in the dashboard's Streamlit secrets (an [auth] provider or a password hash)."""
    import tomllib

    for folder in (cwd or Path.cwd(), Path.home()):
        path = folder / ".streamlit" / "secrets.toml"
        try:
            doc = tomllib.loads(path.read_text(encoding="utf-8"))
        except (OSError, tomllib.TOMLDecodeError):
            continue
        if "auth" in doc or (doc.get("leakfleet") or {}).get("password_hash"):
            return True
    return False


def check_store_url(url: str) -> None:
    """Reject a URL no store understands (ValueError → exit 2) without connecting."""
    if not url.strip():
        raise ValueError("--store: expected a store URL such as sqlite:///./leakfleet.db")
    if "://" in url and url.partition("://")[0].lower() not in _SCHEMES:
        raise ValueError(
            f"--store {url!r}: unknown scheme; expected sqlite:///path/file.db, "
            "influxdb://host:port/database or influxdb2://host:port?org=..&bucket=.."
        )


def streamlit_command(
    store: str,
    *,
    port: int,
    address: str = "127.0.0.1",
    config: str | None = None,
    clock: str = "wall",
    environ: Mapping[str, str] | None = None,
) -> tuple[list[str], dict[str, str]]:
    """argv and environment that run the dashboard headless (also used by ``leakfleet demo``)."""
    if not 0 < port < 65536:
        raise ValueError(f"--port: expected 1..65535, got {port}")
    check_store_url(store)
    env = dict(os.environ if environ is None else environ)
    env.update({"LEAKFLEET_STORE": store, "LEAKFLEET_CLOCK": clock})
    if config:
        env["LEAKFLEET_CONFIG"] = config
    else:
        env.pop("LEAKFLEET_CONFIG", None)
    if not store.startswith(("influxdb://", "influxdb2://")):
        for name in _SINK_SECRETS:
            env.pop(name, None)
    else:
        env.pop("LEAKFLEET_MQTT_PASSWORD", None)
    root = str(_APP.parents[1])
    env["PYTHONPATH"] = os.pathsep.join(p for p in (root, env.get("PYTHONPATH", "")) if p)
    argv = [
        sys.executable, "-m", "streamlit", "run", str(_APP),
        "--server.headless", "true",
        "--server.port", str(port),
        "--server.address", address,
        "--server.fileWatcherType", "none",
        "--server.runOnSave", "false",
        "--browser.gatherUsageStats", "false",
        "--global.developmentMode", "false",
        "--client.toolbarMode", "minimal",
    ]  # fmt: skip
    return argv, env


def _run(args: argparse.Namespace) -> int:
    from dashboard.settings import load_settings

    if args.hash_password:
        from argon2 import PasswordHasher

        secret = sys.stdin.readline().rstrip("\n")
        if len(secret) < 8:
            raise ValueError("a dashboard password needs at least 8 characters")
        print(PasswordHasher().hash(secret))
        return 0
    if not args.store:
        raise ValueError("--store: expected a store URL such as sqlite:///./leakfleet.db")
    check_address(args.address, args.port)
    if not is_loopback(args.address) and not login_configured() and not args.no_login_ok:
        raise ValueError(
            f"--address {args.address}: anyone on that network would see the plant's data; "
            "set up a login first (dashboard/README.md), or add --no-login-ok"
        )
    argv, env = streamlit_command(
        args.store, port=args.port, address=args.address, config=args.config, clock=args.clock
    )
    load_settings(env)  # a config mistake is one line now, not an error page later
    print(f"dashboard: http://{args.address}:{args.port}  (store {args.store}; Ctrl-C stops)",
          flush=True)  # fmt: skip
    return run_until_interrupted(argv, env)


def run_until_interrupted(argv: Sequence[str], env: Mapping[str, str]) -> int:
    """Run Streamlit until it ends, Ctrl-C or SIGTERM; either signal stops the child too (a
    supervisor's stop must not leave it serving the port)."""
    import signal

    proc = subprocess.Popen(list(argv), env=dict(env))

    def stop(signum: int, frame: object) -> None:
        raise KeyboardInterrupt

    previous = signal.signal(signal.SIGTERM, stop)
    try:
        return proc.wait()
    except KeyboardInterrupt:
        proc.terminate()
        try:
            proc.wait(timeout=10)
        except subprocess.TimeoutExpired:
            proc.kill()
            proc.wait()
        return 0
    finally:
        signal.signal(signal.SIGTERM, previous)
