"""Profile validation: one test per kind of mistake; the message names file, key, expectation."""

from __future__ import annotations

import re
from pathlib import Path

import pytest

from gateway.errors import ConfigError
from gateway.profiles import builtin_dir, builtin_profiles, load_profile
from gateway.profiles.decoders import ack_registers


def _edit(tmp_path: Path, base: str, old: str, new: str, name: str | None = None) -> Path:
    text = (builtin_dir() / f"{base}.toml").read_text()
    assert old in text, old
    path = tmp_path / f"{name or base}.toml"
    path.write_text(text.replace(old, new, 1))
    return path


def _fails(path: Path, key: str, expected: str) -> str:
    with pytest.raises(ConfigError) as info:
        load_profile(path)
    message = str(info.value)
    assert message.startswith(f"{path}: {key}: expected"), message
    assert expected in message, message
    return message


def test_builtins_load() -> None:
    assert builtin_profiles() == ["lf-delim", "lf-kv", "lf-mbinput", "lf-mblast", "lf-mbnoclk",
                                  "lf-mbrtu", "lf-mbtcp", "lf-noclock", "lf-print", "lf-semi",
                                  "lf-ticket"]
    for name in builtin_profiles():
        p = load_profile(name)
        # lf-kv 1.1: answers with keys no field maps are rejected (unknown_keys = "reject")
        assert p.label == f"{name}@{'1.1' if name == 'lf-kv' else '1.0'}"


def test_by_name_search_dirs_first(tmp_path: Path) -> None:
    path = _edit(tmp_path, "lf-delim", 'version = "1.0"', 'version = "2.0-site"')
    assert load_profile("lf-delim", [tmp_path]).label == "lf-delim@2.0-site"
    assert load_profile(path).label == "lf-delim@2.0-site"
    with pytest.raises(ConfigError, match=r"expected a profile file acme\.toml in .* built-in"):
        load_profile("acme", [tmp_path])


def test_name_must_match_file(tmp_path: Path) -> None:
    _edit(tmp_path, "lf-delim", "", "", name="other")
    with pytest.raises(ConfigError, match=r"other.toml: profile.name: expected 'other'"):
        load_profile("other", [tmp_path])


def test_not_toml(tmp_path: Path) -> None:
    path = tmp_path / "x.toml"
    path.write_text("[profile\nname=")
    with pytest.raises(ConfigError, match=re.escape(f"{path}: not valid TOML")):
        load_profile(path)


def test_missing_file(tmp_path: Path) -> None:
    with pytest.raises(ConfigError, match="profile file not found"):
        load_profile(tmp_path / "nope.toml")


@pytest.mark.parametrize(
    ("base", "old", "new", "key", "expected"),
    [
        # unknown key
        ("lf-delim", "max_line = 32768", "max_line = 32768\nbaud = 9600", "serial.baud",
         "one of the keys mode, baudrate"),
        # wrong type
        ("lf-delim", "baudrate = 9600", 'baudrate = "fast"', "serial.baudrate", "an integer"),
        ("lf-delim", 'version = "1.0"', "version = 1", "profile.version", "a string"),
        # bad choice
        ("lf-delim", 'mode = "stream"', 'mode = "push"', "serial.mode", "'stream', 'request'"),
        # missing required canonical field
        ("lf-delim", 'cycle = { from = "cycle" }\n', "",
         "result.fields.cycle", "required canonical field cycle (missing)"),
        # unknown canonical field
        ("lf-delim", "cycle = { from", "cycles = { from", "result.fields.cycles",
         "a canonical field: cycle, ended_at"),
        # bad unit
        ("lf-delim", 'unit = "kPa", empty = "error" }\npressure_loss',
         'unit = "kPaa", empty = "error" }\npressure_loss',
         "result.fields.test_pressure_pa.unit", "a pressure unit (unknown pressure unit 'kPaa'"),
        # unit of the wrong kind
        ("lf-delim", 'from = "leak", unit = "sccm"', 'from = "leak", unit = "psi"',
         "result.fields.leak_rate_sccm.unit", "a leak unit"),
        # missing unit
        ("lf-delim", 'from = "loss", unit = "Pa"', 'from = "loss"',
         "result.fields.pressure_loss_pa.unit", "a pressure unit, or unit_from"),
        # field not in the column list
        ("lf-delim", 'from = "loss"', 'from = "lost"', "result.fields.pressure_loss_pa.from",
         "one of the raw fields tag, cycle"),
        # unknown_keys: a choice, and only for key=value answers
        ("lf-kv", 'unknown_keys = "reject"', 'unknown_keys = "drop"', "dialect.unknown_keys",
         "'ignore', 'reject'"),
        ("lf-delim", '[dialect]\n', '[dialect]\nunknown_keys = "reject"\n',
         "dialect.unknown_keys", 'only with kind = "keyvalue"'),
        # bad verdict target
        ("lf-delim", 'GRS = "gross"', 'GRS = "grossly"', "result.fields.verdict.codes.GRS",
         "one of pass, reject, gross, aborted"),
        # bad timestamp format
        ("lf-delim", 'format = "%Y-%m-%d %H:%M:%S", timezone', 'format = "YYYY-MM-DD", timezone',
         "result.fields.ended_at.format", '"iso", "unix" or a strftime pattern'),
        # bad time zone
        ("lf-delim", 'timezone = "station"', 'timezone = "Europe/Nowhere"',
         "result.fields.ended_at.timezone", "an IANA time zone"),
        # required field declared optional
        ("lf-delim", 'cycle = { from = "cycle" }',
         'cycle = { from = "cycle", empty = "none" }', "result.fields.cycle.empty",
         "cycle is required"),
        # bad regex
        ("lf-print", "(?P<result>\\w+)'", "(?P<result>\\w+'", "calibration.pattern",
         "a valid regular expression"),
        # regex without named groups
        ("lf-print", "pattern = 'CAL", "pattern = 'CAL (x)'\n# ", "calibration.pattern",
         "a regular expression with named groups"),
        # overlapping fixed-width columns
        ("lf-print", '{ name = "cycle", start = 2, width = 7 }',
         '{ name = "cycle", start = 2, width = 9 }', "result.columns",
         "columns that do not overlap"),
        # request mode needs an end rule
        ("lf-kv", 'end_line = "END"\nempty = "NONE"\ntimeout_s = 2.0\n\n[[serial.requests]]',
         'empty = "NONE"\ntimeout_s = 2.0\n\n[[serial.requests]]', "serial.requests[0].end_line",
         "exactly one of end_line"),
        # unit_from naming a missing raw field is only checkable for column dialects: kv ok,
        # delimited: no unit_from column
        ("lf-delim", 'from = "limit", unit = "sccm"', 'from = "limit", unit_from = "LU"',
         "result.fields.reject_limit_sccm.unit_from", "one of the raw fields"),
        # two kinds without discriminator
        ("lf-delim", 'when = { field = "tag", equals = "C" }\n', "", "calibration.when",
         "a discriminator"),
        # a section for the other transport
        ("lf-delim", "[dialect]", "[modbus]\nframer = \"tcp\"\n[dialect]", "modbus",
         "one of the keys profile, serial, dialect, result, calibration, trace (unknown key)"),
        # modbus: overlapping registers
        ("lf-mbtcp", "pressure_loss_pa = { at = 8,", "pressure_loss_pa = { at = 7,",
         "modbus.result.fields.pressure_loss_pa", "registers that do not overlap"),
        # modbus: field outside the block
        ("lf-mbtcp", "part_id = { at = 20, type = \"string(8)\"",
         "part_id = { at = 24, type = \"string(8)\"", "modbus.result.fields.part_id",
         "registers inside the block of length 30"),
        # modbus: more than 125 registers per read
        ("lf-mbtcp", "length = 30", "length = 130", "modbus.result.length",
         "at most 125 registers (one Modbus read)"),
        # modbus: slots overlap
        ("lf-mbtcp", "stride = 32", "stride = 20", "modbus.result.stride", "a stride >= length"),
        # modbus: regions overlap
        ("lf-mbtcp", "address = 400", "address = 300", "modbus.calibration.address",
         "an address range that does not overlap modbus.result.base"),
        # modbus: bad register type
        ("lf-mbtcp", 'at = 6, type = "float32"', 'at = 6, type = "float64"',
         "modbus.result.fields.test_pressure_pa.type", "one of int16, uint16, int32"),
        # modbus: bad function code
        ("lf-mbtcp", "function = 3", "function = 6", "modbus.function", "3 (holding registers)"),
        # modbus: null sentinel on the wrong type
        ("lf-mbtcp", 'unit = "sccm", null = "nan"', 'unit = "sccm", null = -1',
         "modbus.result.fields.lower_limit_sccm.null", '"nan" (float32) or an integer'),
        # modbus: bad state
        ("lf-mbtcp", '8 = "fault"', '8 = "broken"', "modbus.state.codes.8", "one of online"),
        # modbus: serial settings on tcp
        ("lf-mbtcp", "device_id = 1", "device_id = 1\nbaudrate = 9600", "modbus.baudrate",
         "no serial settings"),
        # modbus: verdict code key not an integer
        ("lf-mbtcp", '1 = "pass", 2 = "reject"', 'one = "pass", 2 = "reject"',
         "modbus.result.fields.verdict.codes.one", "an integer register code"),
    ],
)
def test_validation_errors(tmp_path: Path, base: str, old: str, new: str, key: str,
                           expected: str) -> None:
    _fails(_edit(tmp_path, base, old, new), key, expected)


def test_acknowledge_disabled_unless_enabled(tmp_path: Path) -> None:
    path = _edit(tmp_path, "lf-mbtcp", "[modbus.state]",
                 "[modbus.acknowledge]\naddress = 10\n\n[modbus.state]")
    assert load_profile(path).modbus.acknowledge is None  # type: ignore[union-attr]
    path = _edit(tmp_path, "lf-mbtcp", "[modbus.state]",
                 "[modbus.acknowledge]\nenabled = true\naddress = 10\ntype = \"uint16\"\n\n"
                 "[modbus.state]")
    ack = load_profile(path).modbus.acknowledge  # type: ignore[union-attr]
    assert ack is not None and ack.address == 10 and ack_registers(ack, 7) == [7]
    # input-register data (lf-mbrtu reads function 4) acknowledge in a holding register
    path = _edit(tmp_path, "lf-mbrtu", "[modbus.state]",
                 "[modbus.acknowledge]\nenabled = true\naddress = 10\n\n[modbus.state]")
    ack = load_profile(path).modbus.acknowledge  # type: ignore[union-attr]
    assert ack is not None and ack.address == 10


def test_state_register_keeps_its_address(tmp_path: Path) -> None:
    path = _edit(tmp_path, "lf-mbtcp", "[modbus.state]\naddress = 0",
                 "[modbus.state]\naddress = 50")
    state = load_profile(path).modbus.state  # type: ignore[union-attr]
    assert state is not None and state.at == 50
