"""gateway.toml: the shipped demo config, and one clear line for every kind of mistake."""

from __future__ import annotations

import sys
import textwrap
from pathlib import Path

import pytest

from gateway.cli import main
from gateway.config import DEFAULT_STORE, load_config
from gateway.errors import ConfigError

pytestmark = pytest.mark.timeout(30)

REPO = Path(__file__).resolve().parents[2]

TZ = 'timezone = "Europe/Berlin"'
GOOD = """
site = "Northmere Works"
gateway_id = "gw-test"
timezone = "Europe/Berlin"

[[stations]]
id = "L1-S1"
line = "L1"
profile = "lf-delim"
endpoint = "tcp://127.0.0.1:15101"

[[stations]]
id = "L2-S3"
line = "L2"
profile = "lf-mbrtu"
endpoint = "run/sim/L2-S3.tty"
poll_interval = "250 ms"
timeout = 1
programs = { 1 = "MV-44" }
overrides = { device_id = 7 }
"""


def write(tmp_path: Path, text: str) -> Path:
    path = tmp_path / "gateway.toml"
    path.write_text(textwrap.dedent(text))
    return path


def test_demo_config_matches_the_simulator_demo() -> None:
    from sim.scenario import load_scenario

    config = load_config("demo")
    scenario = load_scenario("demo")
    assert config.site == scenario.site and config.timezone == scenario.timezone
    by_id = {s.id: s for s in config.stations}
    assert set(by_id) == {s.name for s in scenario.stations}
    for st in scenario.stations:
        gw = by_id[st.name]
        assert gw.profile.name == st.type
        assert gw.line == st.line
        if st.port is not None:
            assert gw.endpoint == f"tcp://127.0.0.1:{st.port}"
        else:
            assert gw.endpoint == f"run/sim/{st.tty}.tty"
        if gw.profile.modbus is not None:
            assert dict(gw.programs) == dict(st.programs)
            assert gw.overrides.get("device_id", gw.profile.modbus.device_id) == st.device_id


def test_annex_config_matches_the_simulator_annex() -> None:
    from sim.scenario import load_scenario

    config = load_config("annex")
    scenario = load_scenario("annex")
    assert config.site == scenario.site and config.timezone == scenario.timezone
    by_id = {s.id: s for s in config.stations}
    assert set(by_id) == {s.name for s in scenario.stations}
    for st in scenario.stations:
        gw = by_id[st.name]
        assert gw.profile.name == st.type and gw.line == st.line
        assert gw.endpoint == f"tcp://127.0.0.1:{st.port}"
        if st.type == "lf-ticket":
            assert gw.overrides["address"] == st.address
        if st.type not in ("lf-noclock", "lf-ticket"):  # these send program names
            assert dict(gw.programs) == dict(st.programs)
        for name in st.programs.values():  # the program sheet matches the simulated programs
            program, sheet = scenario.programs[name], gw.program_params[name]
            assert sheet.reject_limit_sccm == pytest.approx(program.reject_limit_sccm)
            assert sheet.lower_limit_sccm == (None if program.lower_limit_sccm is None
                                              else pytest.approx(program.lower_limit_sccm))
            assert (sheet.fill_s, sheet.stabilise_s, sheet.test_s) == (
                program.fill_s, program.stabilise_s, program.test_s)


def test_good_config_with_defaults(tmp_path: Path) -> None:
    config = load_config(write(tmp_path, GOOD))
    assert config.store == DEFAULT_STORE
    delim, rtu = config.stations
    assert delim.timezone == "Europe/Berlin"  # inherited from the top level
    assert rtu.poll_interval_s == 0.25 and rtu.timeout_s == 1.0 and rtu.timeout_explicit
    assert rtu.programs == {1: "MV-44"} and rtu.overrides == {"device_id": 7}
    assert config.metrics.prometheus_port == 0 and config.metrics.bind == "127.0.0.1"
    assert config.runtime.retention_s is None and config.runtime.max_delay_s == 0.0
    kept = load_config(write(tmp_path, GOOD.replace(
        TZ, TZ + '\n[runtime]\nretention = "400 days"')))
    assert kept.runtime.retention_s == 400 * 86400
    curves = load_config(write(tmp_path, GOOD.replace(
        TZ, TZ + '\n[runtime]\nretention = "400 days"\ntrace_retention = "30 d"')))
    assert curves.runtime.trace_retention_s == 30 * 86400
    assert load_config(write(tmp_path, GOOD), store="sqlite:///x.db").store == "sqlite:///x.db"


@pytest.mark.parametrize(
    ("change", "message"),
    [
        (('site = "Northmere Works"', ""), "site: expected a value (required)"),
        (('profile = "lf-delim"', 'profile = "lf-nope"'), "stations[L1-S1].profile"),
        (('endpoint = "tcp://127.0.0.1:15101"', 'endpoint = "tcp://127.0.0.1"'),
         "stations[L1-S1].endpoint: expected tcp://host:port"),
        (('endpoint = "tcp://127.0.0.1:15101"', 'endpoint = "udp://x:1"'),
         "stations[L1-S1].endpoint: expected tcp://host:port, socket://"),
        (('poll_interval = "250 ms"', 'poll_interval = "fast"'),
         "stations[L2-S3].poll_interval: expected a duration"),
        (('poll_interval = "250 ms"', "poll_interval = -1"),
         "stations[L2-S3].poll_interval: expected a duration from 1 ms to a day"),
        (('timezone = "Europe/Berlin"', 'timezone = "Mars/Olympus"'),
         "timezone: expected an IANA time zone"),
        (("overrides = { device_id = 7 }", 'overrides = { device_id = "7" }'),
         "stations[L2-S3].overrides.device_id: expected an integer"),
        (("overrides = { device_id = 7 }", "overrides = { slave = 7 }"),
         "stations[L2-S3].overrides.slave: expected one of device_id"),
        (('programs = { 1 = "MV-44" }', 'programs = { one = "MV-44" }'),
         "stations[L2-S3].programs.one"),
        (('gateway_id = "gw-test"', 'gateway_id = "gw-test"\nsotre = "x"'),
         "sotre: expected one of the keys"),
        (('id = "L2-S3"', 'id = "L1-S1"'), "stations[L1-S1].id: expected a station id used once"),
        (('endpoint = "run/sim/L2-S3.tty"', 'endpoint = "tcp://127.0.0.1:15101"'),
         "expected an endpoint of its own"),
        (('gateway_id = "gw-test"', 'gateway_id = "gw-test"\nstore = "influxdb://h:8086/db"'),
         "store: expected a journal URL sqlite:///"),
        ((TZ, TZ + '\n[runtime]\nretention = "2 weeks"'),
         "runtime.retention: expected a number of days of at least 1"),
        ((TZ, TZ + '\n[runtime]\nretention = "0.5 d"'),
         "runtime.retention: expected a number of days of at least 1"),
        ((TZ, TZ + '\n[runtime]\nretention = 30'),
         "runtime.retention: expected a number of days"),
        ((TZ, TZ + '\n[runtime]\nretention = "30 d"\ntrace_retention = "90 d"'),
         "runtime.trace_retention: expected at most retention (30 d)"),
    ],
)
def test_mistakes_name_file_key_and_expectation(
    tmp_path: Path, change: tuple[str, str], message: str
) -> None:
    path = write(tmp_path, GOOD.replace(*change))
    with pytest.raises(ConfigError) as err:
        load_config(path)
    text = str(err.value)
    assert text.startswith(str(path)) and message in text, text
    assert "\n" not in text


def test_modbus_tcp_profile_needs_a_tcp_endpoint(tmp_path: Path) -> None:
    bad = GOOD.replace('profile = "lf-mbrtu"', 'profile = "lf-mbtcp"')
    with pytest.raises(ConfigError, match=r"L2-S3\]\.endpoint: expected tcp://host:port for Mod"):
        load_config(write(tmp_path, bad))


def test_not_toml_and_missing_file(tmp_path: Path) -> None:
    with pytest.raises(ConfigError, match="not valid TOML"):
        load_config(write(tmp_path, "site = "))
    with pytest.raises(ConfigError, match="no such config file"):
        load_config(tmp_path / "nope.toml")


def test_check_prints_the_stations_and_exits_0(capsys: pytest.CaptureFixture[str]) -> None:
    assert main(["gateway", "--config", "demo", "--check"]) == 0
    out = capsys.readouterr().out
    assert "ok: site 'Northmere Works'" in out and "L2-S3" in out and "lf-mbrtu@" in out


def test_metrics_port_flag_overrides_the_config(capsys: pytest.CaptureFixture[str]) -> None:
    assert load_config("demo").metrics.enabled is False  # off unless asked for
    assert main(["gateway", "--config", "demo", "--metrics-port", "9108", "--check"]) == 0
    assert "metrics http://127.0.0.1:9108/metrics" in capsys.readouterr().out
    with pytest.raises(SystemExit) as exc:
        main(["gateway", "--config", "demo", "--metrics-port", "70000", "--check"])
    assert exc.value.code == 2
    assert "--metrics-port: expected a TCP port from 0 to 65535" in capsys.readouterr().err


def test_bad_config_is_one_line_and_exit_2(tmp_path: Path) -> None:
    import subprocess

    path = write(tmp_path, GOOD.replace('profile = "lf-delim"', 'profile = "lf-nope"'))
    proc = subprocess.run(
        [sys.executable, "-m", "gateway", "gateway", "--config", str(path)],
        cwd=REPO, capture_output=True, text=True, timeout=30,
    )
    assert proc.returncode == 2
    lines = proc.stderr.strip().splitlines()
    assert len(lines) == 1 and lines[0].startswith("leakfleet gateway: error: "), proc.stderr
    assert "Traceback" not in proc.stderr


def test_sinks_come_from_the_registry_and_run_until_shutdown(tmp_path: Path) -> None:
    import asyncio
    from collections.abc import Mapping
    from typing import Any

    from gateway.runtime import Runtime
    from gateway.sinks import REGISTRY, SinkContext

    pytest.importorskip("gateway.store")
    seen: dict[str, Any] = {}

    class Recorder:
        name = "rec"

        def __init__(self, options: Mapping[str, Any], ctx: SinkContext) -> None:
            if "topic" not in options:
                raise ValueError("topic: expected a string")
            seen["ctx"] = ctx

        async def run(self, store_url: str, stop: asyncio.Event) -> None:
            seen["started"] = store_url
            await stop.wait()
            seen["stopped"] = True

    REGISTRY["recorder"] = lambda name, options, ctx: Recorder(options, ctx)
    try:
        text = GOOD + '\n[sinks.rec]\ntype = "recorder"\ntopic = "x"\n'
        config = load_config(write(tmp_path, text), store=f"sqlite:///{tmp_path / 'j.db'}")
        assert config.sinks == {"rec": {"type": "recorder", "topic": "x"}}

        async def go() -> None:
            stop = asyncio.Event()
            task = asyncio.create_task(Runtime(config).run(stop))
            while "started" not in seen:
                await asyncio.sleep(0.01)
            stop.set()
            await asyncio.wait_for(task, 20)

        asyncio.run(go())
        assert seen["stopped"] and seen["ctx"].stations == {"L1-S1": "L1", "L2-S3": "L2"}

        bad = load_config(write(tmp_path, GOOD + '\n[sinks.rec]\ntype = "recorder"\n'))
        with pytest.raises(ConfigError, match=r"sinks\.rec: topic: expected a string"):
            asyncio.run(Runtime(bad).run(asyncio.Event()))
        assert main(["gateway", "--config", str(tmp_path / "gateway.toml"), "--check"]) == 2
        unknown = load_config(write(tmp_path, GOOD + '\n[sinks.kafka]\nhost = "x"\n'))
        with pytest.raises(ConfigError, match="unknown sink type 'kafka'"):
            asyncio.run(Runtime(unknown).run(asyncio.Event()))
    finally:
        REGISTRY.pop("recorder", None)
