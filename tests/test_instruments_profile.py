"""Instrument files: the samples load; every problem is reported with path and key."""

from __future__ import annotations

import glob
import os
import textwrap

import pytest

from reconcile.instruments.profile import InstrumentProfile, load_profile
from reconcile.data.accuracy import AccuracySpec
from reconcile.errors import InputError, InputErrors

SAMPLES = os.path.join(os.path.dirname(os.path.abspath(__file__)), "..", "sample_data",
                       "instruments")
HEAD = '[instrument]\nrole = "{role}"\nresource = "TCPIP0::10.0.0.5::INSTR"\n'


def _write(tmp_path, text: str, name: str = "inst.toml") -> str:
    path = tmp_path / name
    path.write_text(textwrap.dedent(text), encoding="utf-8")
    return str(path)


@pytest.mark.parametrize("path", sorted(glob.glob(f"{SAMPLES}/*.toml")))
def test_every_sample_loads_and_round_trips(path):
    profile = load_profile(path)
    assert profile.path == path and profile.resource and profile.roles
    assert InstrumentProfile.from_dict(profile.to_dict(), path=path) == profile


def test_sample_dmm_contents():
    dmm = load_profile(f"{SAMPLES}/bench-dmm.toml")
    assert dmm.roles == ("dc_voltmeter", "ac_voltmeter")
    assert dmm.backend == "@py" and dmm.timeout_s == 3.0 and dmm.retries == 1
    dc = dmm.accuracy_for("dc_volts")
    assert dc.full_scales == (0.1, 1.0, 10.0, 100.0, 1000.0)
    assert dc.spec_for(10.0) == AccuracySpec(0.008, 0.001)
    assert dc.over_range == 1.2 and dc.unit == "V"
    assert dmm.accuracy_for("dc_current") is None


def test_sample_supply_overrides_limits_and_scanner_channels():
    supply = load_profile(f"{SAMPLES}/bench-supply.toml")
    assert supply.command("read_voltage", "MEAS:VOLT?") == "MEASURE:VOLTAGE?"
    assert supply.command("set_voltage", "VOLT {value}") == "VOLT {value}"
    assert supply.limits == {"max_voltage_v": 15.0, "max_current_a": 0.1}
    assert supply.accuracy_for("dc_current").spec_for(3.0).floor == 0.002
    scanner = load_profile(f"{SAMPLES}/bench-scanner.toml")
    assert scanner.channels["102"] == "b" and scanner.reference_node == "gnd"
    assert scanner.settle_s == 0.05
    assert scanner.channel_for("vcc") == "101"
    assert scanner.channel_for("c/e") == "105"


def test_defaults(tmp_path):
    profile = load_profile(_write(tmp_path, HEAD.format(role="dc_voltmeter")))
    assert (profile.backend, profile.timeout_s, profile.retries) == ("@py", 2.0, 1)
    assert profile.read_termination == profile.write_termination == "\n"
    assert profile.commands == {} and profile.accuracy == {} and profile.name == ""


BAD = [
    # (role, extra TOML, key, words in the message)
    ("dc_voltmeter", '[accuracy.dc_volts]\nranges = [{range = 0.0, percent_of_reading = 1}]',
     "accuracy.dc_volts.ranges[0].range", "> 0"),
    ("dc_voltmeter", '[accuracy.dc_volts]\nranges = [{percent_of_reading = 1}]',
     "accuracy.dc_volts.ranges[0].range", "missing"),
    ("dc_voltmeter", '[accuracy.dc_volts]\nranges = [{range = 1, percent_of_reading = -0.1}]',
     "accuracy.dc_volts.ranges[0].percent_of_reading", ">= 0"),
    ("dc_voltmeter", '[accuracy.dc_volts]\nranges = [{range = 1, percent_of_reading = "0.1%"}]',
     "accuracy.dc_volts.ranges[0].percent_of_reading", "expected a number"),
    ("dc_voltmeter", '[accuracy.dc_volts]\nranges = [{range = 1, percent_of_reading = 1, '
     'offset = 2}]', "accuracy.dc_volts.ranges[0].offset", "unknown key"),
    ("dc_voltmeter", '[accuracy.dc_volts]\nranges = [{range = 1, percent_of_reading = 1}, '
     '{range = 1.0, percent_of_reading = 2}]', "accuracy.dc_volts.ranges", "given twice"),
    ("dc_voltmeter", '[accuracy.dc_volts]\nover_range = 0.9\n'
     'ranges = [{range = 1, percent_of_reading = 1}]', "accuracy.dc_volts.over_range", ">= 1"),
    ("dc_voltmeter", '[accuracy.dc_volts]\nranges = []', "accuracy.dc_volts.ranges",
     "expected a list"),
    ("dc_voltmeter", '[accuracy.resistance]\nranges = [{range = 1, percent_of_reading = 1}]',
     "accuracy.resistance", "unknown function"),
    ("power_supply", '[accuracy.ac_volts]\nranges = [{range = 1, percent_of_reading = 1}]',
     "accuracy.ac_volts", "does not measure ac_volts"),
    ("power_supply", '[commands]\nread_ac_volts = "X?"', "commands.read_ac_volts",
     "no such action"),
    ("dc_voltmeter", '[commands]\nread_dc_volts_range = "MEAS:VOLT:DC? {rng}"',
     "commands.read_dc_volts_range", "unknown field {rng}"),
    ("power_supply", '[commands]\nset_voltage = "VOLT 5"', "commands.set_voltage",
     "must contain {value}"),
    ("power_supply", '[commands]\nset_voltage = "VOLT {value:.3f}"', "commands.set_voltage",
     "without a format"),
    ("scanner", '[commands]\nclose_channel = "ROUT:CLOS (@{channel}}"', "commands.close_channel",
     "bad braces"),
    ("scanner", '[commands]\nclose_channel = "ROUT:CLOS (@{channel"', "commands.close_channel",
     "bad braces"),
    ("dc_voltmeter", '[commands]\nread_dc_volts = 5', "commands.read_dc_volts",
     "expected a command string"),
    ("dc_voltmeter", '[commands]\nread_dc_volts = " "', "commands.read_dc_volts", "empty"),
    ("function_generator", '[limits]\nmax_voltage_v = 5', "limits.max_voltage_v",
     "power_supply"),
    ("power_supply", '[limits]\nmax_power_w = 5', "limits.max_power_w", "unknown limit"),
    ("power_supply", '[limits]\nmax_voltage_v = -5', "limits.max_voltage_v", "> 0"),
    ("dc_voltmeter", '[channels]\n101 = "b"', "channels", "only for an instrument with role"),
    ("scanner", '[channels]\n101 = "b c"', "channels.101", "node name"),
    ("scanner", '[channels]\n101 = "a/b/c"', "channels.101", "node name"),
    ("scanner", '[channels]\n101 = 7', "channels.101", "node name"),
    ("scanner", '[channels]\n"(@101)" = "b"', "channels.(@101)", "channel id"),
    ("scanner", '[channels]\n101 = "b"\n102 = "b"', "channels.102", "already read by channel 101"),
    ("scanner", '[scanner]\nreference_node = "g n d"', "scanner.reference_node", "node name"),
    ("scanner", '[scanner]\nsettle_s = -1', "scanner.settle_s", ">= 0"),
    ("scanner", '[scanner]\nsettle = 1', "scanner.settle", "unknown key"),
    ("dc_voltmeter", '[calibration]\ndate = 2024', "calibration", "unknown key"),
]


@pytest.mark.parametrize(("role", "extra", "key", "words"), BAD)
def test_problem_reported_with_path_and_key(tmp_path, role, extra, key, words):
    path = _write(tmp_path, HEAD.format(role=role) + extra + "\n")
    with pytest.raises(InputError) as info:
        load_profile(path)
    err = info.value
    assert err.path == path
    assert str(err).startswith(f"{path}: ")
    assert err.key == key, str(err)
    assert words in err.message


@pytest.mark.parametrize(
    ("instrument", "key", "words"),
    [
        ('role = "voltmeter"\nresource = "X::INSTR"', "instrument.role", "unknown role"),
        ('resource = "X::INSTR"', "instrument.role", "missing"),
        ('role = []\nresource = "X::INSTR"', "instrument.role", "expected a role"),
        ('role = "scanner"', "instrument.resource", "missing"),
        ('role = "scanner"\nresource = " X::INSTR"', "instrument.resource", "stray spaces"),
        ('role = "scanner"\nresource = "X::INSTR"\nbackend = "pyvisa"', "instrument.backend",
         "unknown backend"),
        ('role = "scanner"\nresource = "X::INSTR"\ntimeout_s = 0', "instrument.timeout_s", "> 0"),
        ('role = "scanner"\nresource = "X::INSTR"\ntimeout_s = "2 s"', "instrument.timeout_s",
         "expected a number"),
        ('role = "scanner"\nresource = "X::INSTR"\nretries = -1', "instrument.retries",
         "whole number"),
        ('role = "scanner"\nresource = "X::INSTR"\nretries = 1.5', "instrument.retries",
         "whole number"),
        ('role = "scanner"\nresource = "X::INSTR"\ncolour = "red"', "instrument.colour",
         "unknown key"),
    ],
)
def test_instrument_table_problems(tmp_path, instrument, key, words):
    path = _write(tmp_path, "[instrument]\n" + instrument + "\n")
    with pytest.raises(InputError) as info:
        load_profile(path)
    assert info.value.path == path
    assert info.value.key == key
    assert words in info.value.message


def test_every_problem_is_reported_together(tmp_path):
    path = _write(tmp_path, """\
        [instrument]
        role = "power_supply"
        timeout_s = -1

        [commands]
        set_voltage = "VOLT"

        [limits]
        max_current_a = "lots"
        """)
    with pytest.raises(InputErrors) as info:
        load_profile(path)
    keys = [e.key for e in info.value.errors]
    assert keys == ["instrument.resource", "instrument.timeout_s", "commands.set_voltage",
                    "limits.max_current_a"]
    assert all(e.path == path for e in info.value.errors)
    assert "and 3 more problems" in str(info.value)


def test_missing_instrument_table(tmp_path):
    with pytest.raises(InputError) as info:
        load_profile(_write(tmp_path, 'title = "x"\n'))
    assert {e.key for e in info.value.errors} >= {"title", "instrument"}


def test_toml_syntax_error_has_line(tmp_path):
    path = _write(tmp_path, '[instrument]\nrole = "scanner"\nresource = \n')
    with pytest.raises(InputError) as info:
        load_profile(path)
    assert info.value.path == path and info.value.line == 3
    assert "not valid TOML" in info.value.message


def test_missing_file():
    with pytest.raises(InputError, match="instrument file not found") as info:
        load_profile("no/such/file.toml")
    assert info.value.path == "no/such/file.toml"


def test_sim_backend_is_taken_relative_to_the_file(tmp_path):
    path = _write(tmp_path, HEAD.format(role="scanner") + 'backend = "sims/b.yaml@sim"\n')
    assert load_profile(path).backend == os.path.join(str(tmp_path), "sims/b.yaml") + "@sim"


def test_channel_for_unknown_node(tmp_path):
    path = _write(tmp_path, HEAD.format(role="scanner") + '[channels]\n101 = "b/e"\n')
    profile = load_profile(path)
    assert profile.channel_for("b/e") == "101"
    with pytest.raises(InputError, match="no scanner channel reads 'b'") as info:
        profile.channel_for("b")
    assert info.value.key == "channels" and info.value.path == path
