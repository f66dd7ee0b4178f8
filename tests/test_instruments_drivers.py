"""Role drivers against a scripted transport: setting -> text sent -> reply -> parsed value.

Default command forms are the SCPI-1999 / IEEE 488.2 ones (from memory, as listed in
instruments/commands.py); the number forms of replies are IEEE 488.2 8.7 NR1/NR2/NR3.
"""

from __future__ import annotations

import math
import os

import pytest

from reconcile.instruments.ac_voltmeter import AcVoltmeter
from reconcile.instruments.dc_voltmeter import DcVoltmeter
from reconcile.instruments.fake import FakeTransport
from reconcile.instruments.function_generator import FunctionGenerator, vrms_to_vpp_sine
from reconcile.instruments.power_supply import PowerSupply
from reconcile.instruments.profile import InstrumentProfile, load_profile
from reconcile.instruments.scanner import Scanner
from reconcile.instruments.scpi import Identity
from reconcile.errors import InputError, InstrumentError

NO_ERROR = '+0,"No error"'  # IEEE 488.2 / SCPI-1999: code 0 = empty error queue
ERR = "SYST:ERR?"
SAMPLES = os.path.join(os.path.dirname(os.path.abspath(__file__)), "..", "sample_data",
                       "instruments")

# (driver, method, args, reply table, text sent in order, parsed value)
TABLE = [
    # SCPI-1999 MEASure:VOLTage:DC? [<range>]
    (DcVoltmeter, "read_dc_volts", (), {"MEAS:VOLT:DC?": "+1.62000000E+00"},
     ["MEAS:VOLT:DC?"], 1.62),
    (DcVoltmeter, "read_dc_volts", (10.0,), {"MEAS:VOLT:DC? 10": "+1.62010000E+00"},
     ["MEAS:VOLT:DC? 10"], 1.6201),
    (DcVoltmeter, "read_dc_volts", (0.1,), {"MEAS:VOLT:DC? 0.1": "-5.0E-03"},
     ["MEAS:VOLT:DC? 0.1"], -0.005),
    (DcVoltmeter, "read_dc_volts", (), {"MEAS:VOLT:DC?": "2"}, ["MEAS:VOLT:DC?"], 2.0),
    # SCPI-1999 MEASure:VOLTage:AC? [<range>]
    (AcVoltmeter, "read_ac_volts", (), {"MEAS:VOLT:AC?": "+7.07106781E-02"},
     ["MEAS:VOLT:AC?"], 0.0707106781),
    (AcVoltmeter, "read_ac_volts", (1,), {"MEAS:VOLT:AC? 1": "0.5"}, ["MEAS:VOLT:AC? 1"], 0.5),
    # supply read-backs: MEAS:VOLT? / MEAS:CURR? actual, VOLT? / CURR? set points
    (PowerSupply, "read_voltage", (), {"MEAS:VOLT?": "+4.98000E+00"}, ["MEAS:VOLT?"], 4.98),
    (PowerSupply, "read_current", (), {"MEAS:CURR?": "+5.42E-04"}, ["MEAS:CURR?"], 5.42e-4),
    (PowerSupply, "read_voltage_setting", (), {"VOLT?": "5.000"}, ["VOLT?"], 5.0),
    (PowerSupply, "read_current_limit", (), {"CURR?": "0.1"}, ["CURR?"], 0.1),
    (PowerSupply, "read_output", (), {"OUTP?": "1"}, ["OUTP?"], True),
    (PowerSupply, "read_output", (), {"OUTP?": "0"}, ["OUTP?"], False),
    # supply settings, each followed by one error-queue read
    (PowerSupply, "set_voltage", (5,), {}, ["VOLT 5", ERR], None),
    (PowerSupply, "set_voltage", (4.98,), {}, ["VOLT 4.98", ERR], None),
    (PowerSupply, "set_current_limit", (0.05,), {}, ["CURR 0.05", ERR], None),
    (PowerSupply, "output_on", (), {}, ["OUTP ON", ERR], None),
    (PowerSupply, "output_off", (), {}, ["OUTP OFF", ERR], None),
    # generator: FUNC SIN, FREQ, VOLT:UNIT VPP|VRMS + VOLT, VOLT:OFFS, OUTP
    (FunctionGenerator, "set_sine", (), {}, ["FUNC SIN", ERR], None),
    (FunctionGenerator, "set_frequency", (1e4,), {}, ["FREQ 10000", ERR], None),
    (FunctionGenerator, "set_frequency", (1.5e6,), {}, ["FREQ 1500000", ERR], None),
    (FunctionGenerator, "set_frequency", (2.5e-3,), {}, ["FREQ 0.0025", ERR], None),
    (FunctionGenerator, "set_amplitude_vpp", (0.1,), {}, ["VOLT:UNIT VPP", "VOLT 0.1", ERR], None),
    (FunctionGenerator, "set_amplitude_vrms", (0.05,), {},
     ["VOLT:UNIT VRMS", "VOLT 0.05", ERR], None),
    (FunctionGenerator, "set_offset", (0,), {}, ["VOLT:OFFS 0", ERR], None),
    (FunctionGenerator, "set_offset", (-1.5e-3,), {}, ["VOLT:OFFS -0.0015", ERR], None),
    (FunctionGenerator, "output_on", (), {}, ["OUTP ON", ERR], None),
    (FunctionGenerator, "output_off", (), {}, ["OUTP OFF", ERR], None),
    (FunctionGenerator, "configure_sine", (1e3, 0.2, "Vpp"), {},
     ["FUNC SIN", "FREQ 1000", "VOLT:UNIT VPP", "VOLT 0.2", "VOLT:OFFS 0", ERR], None),
    (FunctionGenerator, "configure_sine", (1e4, 0.05, "Vrms", 0.5), {},
     ["FUNC SIN", "FREQ 10000", "VOLT:UNIT VRMS", "VOLT 0.05", "VOLT:OFFS 0.5", ERR], None),
    (FunctionGenerator, "read_frequency", (), {"FREQ?": "+1.0000000000000E+04"}, ["FREQ?"], 1e4),
    (FunctionGenerator, "read_output", (), {"OUTP?": "OFF"}, ["OUTP?"], False),
    # scanner: ROUT:CLOS / ROUT:OPEN with a channel list (@...)
    (Scanner, "close_channel", (101,), {}, ["ROUT:CLOS (@101)", ERR], None),
    (Scanner, "open_channel", ("101",), {}, ["ROUT:OPEN (@101)", ERR], None),
    (Scanner, "open_channels", ([101, "102"],), {}, ["ROUT:OPEN (@101,102)", ERR], None),
    (Scanner, "is_closed", (101,), {"ROUT:CLOS? (@101)": "1"}, ["ROUT:CLOS? (@101)"], True),
    # IEEE 488.2 common commands through any driver
    (DcVoltmeter, "identify", (), {"*IDN?": "NULLBENCH,DM-65,SN0001,1.02"}, ["*IDN?"],
     Identity("NULLBENCH", "DM-65", "SN0001", "1.02")),
    (PowerSupply, "reset", (), {}, ["*RST"], None),
    (Scanner, "clear", (), {}, ["*CLS"], None),
    (FunctionGenerator, "wait_complete", (), {"*OPC?": "1"}, ["*OPC?"], None),
    (AcVoltmeter, "check_errors", (), {}, [ERR], None),
]


def _ids() -> list[str]:
    return [f"{d.__name__}.{m}{args}" for d, m, args, *_ in TABLE]


@pytest.mark.parametrize(("driver", "method", "args", "replies", "sent", "parsed"), TABLE,
                         ids=_ids())
def test_setting_text_reply_value(driver, method, args, replies, sent, parsed):
    fake = FakeTransport({ERR: NO_ERROR, **replies}, resource="TCPIP0::10.0.0.5::INSTR")
    result = getattr(driver(fake), method)(*args)
    assert fake.sent == sent
    if isinstance(parsed, float):
        assert result == pytest.approx(parsed, rel=1e-12)
    else:
        assert result == parsed


@pytest.mark.parametrize("driver", [DcVoltmeter, AcVoltmeter, PowerSupply, FunctionGenerator,
                                    Scanner])
def test_constructing_a_driver_sends_nothing(driver):
    fake = FakeTransport({})
    driver(fake)
    assert fake.sent == []


def test_setting_refused_by_instrument_names_resource_command_and_error():
    # SCPI-1999: -222 "Data out of range" pushed on the error queue by a refused setting
    fake = FakeTransport({ERR: ['-222,"Data out of range"', NO_ERROR]}, resource="GPIB0::5::INSTR")
    with pytest.raises(InstrumentError) as info:
        PowerSupply(fake).set_voltage(50)
    text = str(info.value)
    assert "GPIB0::5::INSTR" in text and "'VOLT 50'" in text and '-222 "Data out of range"' in text


def test_verify_settings_off_sends_no_error_query():
    fake = FakeTransport({})
    PowerSupply(fake, verify_settings=False).set_voltage(3.3)
    assert fake.sent == ["VOLT 3.3"]


@pytest.mark.parametrize("reply", ["#\x15?garbled", "", "1.62 V", "OK"])
def test_garbage_reading_names_resource_command_and_reply(reply):
    fake = FakeTransport({"MEAS:VOLT:DC?": reply}, resource="TCPIP0::10.0.0.5::INSTR")
    with pytest.raises(InstrumentError) as info:
        DcVoltmeter(fake).read_dc_volts()
    text = str(info.value)
    assert "TCPIP0::10.0.0.5::INSTR" in text and "'MEAS:VOLT:DC?'" in text
    assert repr(reply) in text


def test_fake_garbage_on_reaches_the_driver_as_instrument_error():
    fake = FakeTransport({"MEAS:CURR?": "+5.42E-04"}, garbage_on=["MEAS:CURR?"])
    with pytest.raises(InstrumentError, match="not a number"):
        PowerSupply(fake).read_current()


def test_timeout_names_resource_and_command():
    fake = FakeTransport({}, resource="TCPIP0::10.0.0.5::INSTR", timeout_on=["MEAS:VOLT:AC?"])
    with pytest.raises(InstrumentError) as info:
        AcVoltmeter(fake).read_ac_volts()
    assert str(info.value).startswith(
        "TCPIP0::10.0.0.5::INSTR did not answer 'MEAS:VOLT:AC?' within 2 s")


def test_overload_reading_is_an_instrument_error():
    # SCPI-1999 (from memory): +9.9E37 is the overload / infinity marker
    fake = FakeTransport({"MEAS:VOLT:DC? 0.1": "+9.90000000E+37"})
    with pytest.raises(InstrumentError, match="overload"):
        DcVoltmeter(fake).read_dc_volts(0.1)


def _profile(data: dict) -> InstrumentProfile:
    base = {"instrument": {"resource": "TCPIP0::10.0.0.5::INSTR"}}
    base["instrument"].update(data.pop("instrument", {}))
    return InstrumentProfile.from_dict({**base, **data}, path="bench.toml")


@pytest.mark.parametrize(
    ("role", "overrides", "call", "sent"),
    [
        ("dc_voltmeter", {"read_dc_volts": "VAL?"}, lambda d: d.read_dc_volts(), ["VAL?"]),
        ("dc_voltmeter", {"read_dc_volts_range": "CONF:VOLT:DC {range};:READ?"},
         lambda d: d.read_dc_volts(10), ["CONF:VOLT:DC 10;:READ?"]),
        ("ac_voltmeter", {"read_ac_volts": "MEASURE:VOLTAGE:AC?"}, lambda d: d.read_ac_volts(),
         ["MEASURE:VOLTAGE:AC?"]),
        ("power_supply", {"set_voltage": "INST:NSEL 2;:VOLT {value}", "read_error": "ERR?"},
         lambda d: d.set_voltage(12), ["INST:NSEL 2;:VOLT 12", "ERR?"]),
        ("function_generator", {"set_frequency": "SOUR2:FREQ {value}"},
         lambda d: d.set_frequency(1e3), ["SOUR2:FREQ 1000", ERR]),
        ("scanner", {"close_channel": "ROUTE:CLOSE (@{channel})"},
         lambda d: d.close_channel(101), ["ROUTE:CLOSE (@101)", ERR]),
        ("dc_voltmeter", {"identify": "ID?"}, lambda d: d.identify(), ["ID?"]),
    ],
)
def test_instrument_file_overrides_change_the_command_sent(role, overrides, call, sent):
    profile = _profile({"instrument": {"role": role}, "commands": overrides})
    driver = {"dc_voltmeter": DcVoltmeter, "ac_voltmeter": AcVoltmeter,
              "power_supply": PowerSupply, "function_generator": FunctionGenerator,
              "scanner": Scanner}[role]
    fake = FakeTransport(lambda cmd: {"ID?": "A,B,C,D"}.get(cmd, NO_ERROR if "ERR" in cmd
                                                            else "+1.0E+00"))
    call(driver(fake, profile))
    assert fake.sent == sent


def test_profile_with_another_role_is_refused():
    profile = load_profile(f"{SAMPLES}/bench-generator.toml")
    with pytest.raises(InputError) as info:
        DcVoltmeter(FakeTransport({}), profile)
    assert info.value.key == "instrument.role"
    assert info.value.path.endswith("bench-generator.toml")


@pytest.mark.parametrize(
    ("call", "key"),
    [
        (lambda s: s.set_voltage(20.0), "limits.max_voltage_v"),
        (lambda s: s.set_voltage(-16.0), "limits.max_voltage_v"),
        (lambda s: s.set_current_limit(0.5), "limits.max_current_a"),
    ],
)
def test_supply_limits_refuse_set_points_before_sending(call, key):
    profile = load_profile(f"{SAMPLES}/bench-supply.toml")  # max 15 V, 0.1 A
    fake = FakeTransport({ERR: NO_ERROR})
    with pytest.raises(InputError) as info:
        call(PowerSupply(fake, profile))
    assert info.value.key == key
    assert fake.sent == []


def test_generator_amplitude_limit_compares_sine_vrms_as_peak_to_peak():
    # sine: Vpp = 2·sqrt(2)·Vrms (any circuits handbook, from memory)
    assert vrms_to_vpp_sine(1.0) == pytest.approx(2.0 * math.sqrt(2.0))
    profile = load_profile(f"{SAMPLES}/bench-generator.toml")  # max 1.0 Vpp
    fake = FakeTransport({ERR: NO_ERROR})
    gen = FunctionGenerator(fake, profile)
    gen.set_amplitude_vrms(0.35)  # 0.99 Vpp: allowed
    with pytest.raises(InputError, match="max_amplitude_vpp"):
        gen.set_amplitude_vrms(0.36)  # 1.018 Vpp
    with pytest.raises(InputError, match="max_amplitude_vpp"):
        gen.set_amplitude_vpp(1.2)
    assert fake.sent == ["VOLT:UNIT VRMS", "VOLT 0.35", ERR]


@pytest.mark.parametrize(
    ("call", "key"),
    [
        (lambda g: g.set_frequency(0), "frequency_hz"),
        (lambda g: g.set_frequency(float("nan")), "frequency_hz"),
        (lambda g: g.set_amplitude_vpp(-0.1), "amplitude"),
        (lambda g: g.configure_sine(1e3, 0.1, "V"), "unit"),
        (lambda g: g.set_offset(float("inf")), "offset_v"),
    ],
)
def test_generator_rejects_bad_settings(call, key):
    fake = FakeTransport({ERR: NO_ERROR})
    with pytest.raises(InputError) as info:
        call(FunctionGenerator(fake))
    assert info.value.key == key
    assert fake.sent == []


def test_scanner_select_breaks_before_make_and_settles():
    profile = load_profile(f"{SAMPLES}/bench-scanner.toml")  # 102 = b, 103 = c, 105 = c/e
    fake = FakeTransport({ERR: NO_ERROR})
    waits: list[float] = []
    scanner = Scanner(fake, profile, sleep=waits.append)
    assert scanner.select("b") == "102"
    assert scanner.select("c") == "103"
    assert scanner.select("c/gnd") == "103"  # the same thing, already closed: nothing sent
    assert scanner.select("c/e") == "105"
    scanner.release()
    assert fake.sent == [
        "ROUT:CLOS (@102)", ERR,
        "ROUT:OPEN (@102)", ERR, "ROUT:CLOS (@103)", ERR,
        "ROUT:OPEN (@103)", ERR, "ROUT:CLOS (@105)", ERR,
        "ROUT:OPEN (@105)", ERR,
    ]
    assert waits == [0.05, 0.05, 0.05]
    assert scanner.closed_channel is None


def test_scanner_select_unknown_node_lists_channels():
    profile = load_profile(f"{SAMPLES}/bench-scanner.toml")
    with pytest.raises(InputError, match="102 = b") as info:
        Scanner(FakeTransport({}), profile).select("out")
    assert info.value.key == "channels"


@pytest.mark.parametrize("channel", ["(@101)", "101,102", "", True, 1.5])
def test_scanner_rejects_channel_lists_where_one_channel_is_meant(channel):
    fake = FakeTransport({ERR: NO_ERROR})
    with pytest.raises(InputError):
        Scanner(fake).close_channel(channel)
    assert fake.sent == []


def test_dc_uncertainty_from_instrument_file_by_hand():
    # JCGM 100:2008 4.3.7: u = a/sqrt(3), a = 0.008 % of reading + 0.001 % of range.
    # 1.62 V is beyond 1.2 x 1 V, so autorange sits on 10 V:
    # a = 1.62*8e-5 + 10*1e-5 = 2.296e-4 V; u = 2.296e-4/1.7320508 = 1.325596e-4 V
    profile = load_profile(f"{SAMPLES}/bench-dmm.toml")
    dmm = DcVoltmeter(FakeTransport({}), profile)
    assert dmm.standard_uncertainty(1.62) == pytest.approx(1.325596e-4, rel=1e-6)
    # asked for range 5 V: the meter takes its 10 V range, same answer
    assert dmm.standard_uncertainty(1.62, range_v=5.0) == pytest.approx(1.325596e-4, rel=1e-6)
    # 0.5 V on the 1 V range: a = 0.5*8e-5 + 1*1e-5 = 5e-5 V; u = 2.886751e-5 V
    assert dmm.standard_uncertainty(0.5) == pytest.approx(2.886751e-5, rel=1e-6)
    assert DcVoltmeter(FakeTransport({})).standard_uncertainty(1.62) is None


def test_ac_and_supply_uncertainty_from_instrument_files_by_hand():
    # JCGM 100:2008 4.3.7. AC, 0.1 V on the 0.1 V range: a = 0.1*0.1e-2 + 0.1*0.05e-2
    # = 1.5e-4 V; u = 8.660254e-5 V
    ac = AcVoltmeter(FakeTransport({}), load_profile(f"{SAMPLES}/bench-dmm.toml"))
    assert ac.standard_uncertainty(0.1) == pytest.approx(8.660254e-5, rel=1e-6)
    # supply read-back 5 V: a = 5*0.05e-2 + 0.010 = 0.0125 V; u = 7.216878e-3 V
    # current 5.42e-4 A: a = 5.42e-4*0.2e-2 + 0.002 = 2.001084e-3 A; u = 1.155326e-3 A
    supply = PowerSupply(FakeTransport({}), load_profile(f"{SAMPLES}/bench-supply.toml"))
    assert supply.standard_uncertainty_voltage(5.0) == pytest.approx(7.216878e-3, rel=1e-6)
    assert supply.standard_uncertainty_current(5.42e-4) == pytest.approx(1.155326e-3, rel=1e-6)


def test_driver_closes_its_transport_as_context_manager():
    fake = FakeTransport({"MEAS:VOLT:DC?": "1"})
    with DcVoltmeter(fake) as dmm:
        assert dmm.read_dc_volts() == 1.0
    assert fake.closed


@pytest.mark.parametrize("range_v", [0.0, -10.0, float("nan")])
def test_voltmeter_range_must_be_positive(range_v):
    fake = FakeTransport({})
    with pytest.raises(InputError) as info:
        DcVoltmeter(fake).read_dc_volts(range_v)
    with pytest.raises(InputError):
        AcVoltmeter(fake).read_ac_volts(range_v)
    assert info.value.key == "range_v"
    assert fake.sent == []
