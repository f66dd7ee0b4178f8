"""SCPI number parsing, IEEE 488.2 common commands and the SCPI error queue.

References (from memory, not checked against the texts): IEEE 488.2-1992 8.7 (NR1, NR2,
NR3 numeric response forms), 10.14 (*IDN? four fields), 10.18 (*OPC? answers 1);
SCPI-1999 volume 1 (SYSTem:ERRor? queue read until code 0; 9.9E37 overload, 9.91E37
not-a-number).
"""

from __future__ import annotations

import pytest

from reconcile.instruments import scpi
from reconcile.instruments.fake import FakeTransport
from reconcile.errors import InputError, InstrumentError

NO_ERROR = '+0,"No error"'


@pytest.mark.parametrize(
    ("reply", "value"),
    [
        ("42", 42.0),  # NR1
        ("-7", -7.0),  # NR1
        ("-0.125", -0.125),  # NR2
        ("+.5", 0.5),  # NR2
        ("+1.234E-03", 1.234e-3),  # NR3
        ("1.5e+2", 150.0),  # NR3, lower-case exponent
        ("-2.5E0", -2.5),  # NR3
        ("  +1.00000000E+00\r\n", 1.0),  # stray termination
        ("9.8E37", 9.8e37),  # big but not the overload marker
    ],
)
def test_parse_number_forms(reply, value):
    assert scpi.parse_number(reply) == value


@pytest.mark.parametrize("reply", ["", "abc", "1.2.3", "1,2", "1.0 V", "0x10", "nan", "inf",
                                   "E5", "+-1", "1 E5"])
def test_parse_number_garbage_names_resource_command_and_reply(reply):
    with pytest.raises(InstrumentError) as info:
        scpi.parse_number(reply, resource="USB0::1::2::3::INSTR", command="READ?")
    text = str(info.value)
    assert "USB0::1::2::3::INSTR" in text and "'READ?'" in text and repr(reply) in text


@pytest.mark.parametrize(
    ("reply", "words"),
    [
        ("+9.9E37", "overload"),
        ("9.90000000E+37", "overload"),
        ("-9.9E37", "negative overload"),
        ("9.91E37", "no valid reading"),
        ("+9.91000000E+37", "no valid reading"),
    ],
)
def test_scpi_overload_and_not_a_number_markers(reply, words):
    with pytest.raises(InstrumentError, match=words):
        scpi.parse_number(reply, resource="R", command="MEAS:VOLT:DC?")


def test_parse_numbers_and_bool():
    assert scpi.parse_numbers("+1.0E+00,2.5,-3E-1") == [1.0, 2.5, -0.3]
    assert [scpi.parse_bool(r) for r in ("1", "0", "ON", "off", "+1")] == [
        True, False, True, False, True]
    with pytest.raises(InstrumentError, match="expected 1/0"):
        scpi.parse_bool("2", resource="R", command="OUTP?")


@pytest.mark.parametrize(
    ("value", "text"),
    [(1000.0, "1000"), (0.001, "0.001"), (1.5e-5, "1.5E-05"), (1e4, "10000"), (4.98, "4.98"),
     (-0.0015, "-0.0015"), (1 / 3, "0.333333333333"), (1e13, "1E+13"), (0, "0"), (5, "5")],
)
def test_format_number(value, text):
    assert scpi.format_number(value) == text
    assert float(text) == pytest.approx(value, rel=1e-11)


@pytest.mark.parametrize("value", [float("nan"), float("inf"), "5 V", None])
def test_format_number_refuses_non_numbers(value):
    with pytest.raises(InputError) as info:
        scpi.format_number(value, key="volts")
    assert info.value.key == "volts"


def test_identify_parses_four_fields():
    fake = FakeTransport({"*IDN?": "NULLBENCH, DM-65 ,0,1.02,build 7"})
    ident = scpi.identify(fake)
    # a comma inside the last field stays in the firmware field
    assert ident == scpi.Identity("NULLBENCH", "DM-65", "0", "1.02,build 7")
    assert ident.to_dict()["model"] == "DM-65"


@pytest.mark.parametrize("reply", ["JUNK", "A,B,C", ",B,C,D"])
def test_identify_rejects_malformed_reply(reply):
    fake = FakeTransport({"*IDN?": reply}, resource="GPIB0::3::INSTR")
    with pytest.raises(InstrumentError) as info:
        scpi.identify(fake)
    assert "GPIB0::3::INSTR" in str(info.value) and repr(reply) in str(info.value)


def test_reset_clear_wait_complete():
    fake = FakeTransport({"*OPC?": "1"})
    scpi.reset(fake)
    scpi.clear(fake)
    scpi.wait_complete(fake)
    assert fake.sent == ["*RST", "*CLS", "*OPC?"]
    with pytest.raises(InstrumentError, match="expected 1"):
        scpi.wait_complete(FakeTransport({"*OPC?": "0"}))


def test_error_queue_read_until_code_zero_and_listed_in_order():
    queue = ['-113,"Undefined header"', '-222,"Data out of range"', NO_ERROR]
    fake = FakeTransport({"SYST:ERR?": queue}, resource="TCPIP0::10.0.0.6::INSTR")
    with pytest.raises(InstrumentError) as info:
        scpi.check_errors(fake, after=["VOLT 50"])
    assert str(info.value) == (
        "TCPIP0::10.0.0.6::INSTR reported 2 errors after 'VOLT 50': "
        '-113 "Undefined header"; -222 "Data out of range"'
    )
    assert fake.queries == ["SYST:ERR?"] * 3


@pytest.mark.parametrize("empty", ['+0,"No error"', '0,"No error"', "0", '+0, "No error"'])
def test_empty_error_queue_forms(empty):
    fake = FakeTransport({"SYST:ERR?": empty})
    assert scpi.read_errors(fake) == []
    scpi.check_errors(fake)


def test_error_entry_without_quotes_is_kept():
    fake = FakeTransport({"SYST:ERR?": ["-100,Command error", "0"]})
    assert scpi.read_errors(fake) == [scpi.ScpiError(-100, "Command error")]


def test_error_queue_that_never_empties_stops_after_the_cap():
    fake = FakeTransport({"SYST:ERR?": '-350,"Queue overflow"'}, resource="R")
    with pytest.raises(InstrumentError, match="still not empty after 20 reads"):
        scpi.check_errors(fake)
    assert len(fake.queries) == scpi.MAX_ERROR_READS == 20


def test_garbage_in_the_error_queue_is_reported():
    fake = FakeTransport({"SYST:ERR?": "OK"}, resource="R")
    with pytest.raises(InstrumentError, match="'OK'"):
        scpi.read_errors(fake)


def test_configure_writes_then_checks_once():
    fake = FakeTransport({"SYST:ERR?": NO_ERROR})
    scpi.configure(fake, "FUNC SIN", "FREQ 1000")
    assert fake.sent == ["FUNC SIN", "FREQ 1000", "SYST:ERR?"]
    bad = FakeTransport({"SYST:ERR?": ['-224,"Illegal parameter value"', NO_ERROR]}, resource="R")
    with pytest.raises(InstrumentError, match="after 'FUNC SIN', 'FREQ -1'"):
        scpi.configure(bad, "FUNC SIN", "FREQ -1")


def test_query_number_names_command_on_timeout():
    fake = FakeTransport({}, resource="R", timeout_on=["READ?"])
    with pytest.raises(InstrumentError, match="did not answer 'READ\\?'"):
        scpi.query_number(fake, "READ?")
