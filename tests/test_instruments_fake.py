"""The scripted transport the other instrument tests and the simulated bench rely on."""

from __future__ import annotations

import pytest

from reconcile.instruments.fake import GARBAGE_REPLY, FakeTransport
from reconcile.instruments.transport import Transport
from reconcile.errors import InstrumentError


def test_fake_is_a_transport_and_records_everything_in_order():
    fake = FakeTransport({"*IDN?": "A,B,C,D\n"}, resource="FAKE::1")
    assert isinstance(fake, Transport)
    fake.write("*RST")
    assert fake.query("*IDN?") == "A,B,C,D"  # stripped like a real reply
    fake.write("*CLS")
    assert fake.sent == ["*RST", "*IDN?", "*CLS"]
    assert fake.writes == ["*RST", "*CLS"]
    assert fake.queries == ["*IDN?"]


def test_sequence_replies_are_given_in_turn_and_the_last_repeats():
    fake = FakeTransport({"SYST:ERR?": ['-113,"Undefined header"', '+0,"No error"']})
    assert [fake.query("SYST:ERR?") for _ in range(3)] == [
        '-113,"Undefined header"', '+0,"No error"', '+0,"No error"']


def test_function_replies_see_state_kept_by_on_write():
    # a simulated bench: the reading depends on which scanner channel is closed
    volts = {"101": "1.62", "102": "2.15"}
    state = {"closed": None}

    def on_write(cmd: str) -> None:
        if cmd.startswith("ROUT:CLOS (@"):
            state["closed"] = cmd[len("ROUT:CLOS (@"):-1]

    def reply(cmd: str) -> str | None:
        return volts.get(state["closed"]) if cmd == "MEAS:VOLT:DC?" else None

    fake = FakeTransport(reply, on_write=on_write)
    fake.write("ROUT:CLOS (@102)")
    assert fake.query("MEAS:VOLT:DC?") == "2.15"
    fake.write("ROUT:CLOS (@101)")
    assert fake.query("MEAS:VOLT:DC?") == "1.62"
    with pytest.raises(InstrumentError, match="did not answer 'MEAS:RES\\?'"):
        fake.query("MEAS:RES?")


def test_per_command_function_reply():
    fake = FakeTransport({"MEAS:VOLT:DC?": lambda cmd: f"{len(cmd)}"})
    assert fake.query("MEAS:VOLT:DC?") == "13"


def test_timeouts_and_garbage_on_chosen_commands():
    fake = FakeTransport({"A?": "1", "B?": "2", "C?": "3"}, resource="TCPIP0::h::INSTR",
                         timeout_on=["A?"], garbage_on=["B?"], timeout_s=0.5)
    with pytest.raises(InstrumentError) as info:
        fake.query("A?")
    assert str(info.value) == "TCPIP0::h::INSTR did not answer 'A?' within 0.5 s (tried 1 time)"
    assert fake.query("B?") == GARBAGE_REPLY
    fake.garble({"C?": "??"})
    assert fake.query("C?") == "??"
    fake.time_out("C?")
    with pytest.raises(InstrumentError):
        fake.query("C?")


def test_unprogrammed_query_times_out_and_says_so():
    with pytest.raises(InstrumentError, match="no reply for it"):
        FakeTransport({}).query("*IDN?")


def test_closed_fake_refuses_to_send():
    fake = FakeTransport({"A?": "1"})
    fake.close()
    with pytest.raises(InstrumentError, match="closed"):
        fake.query("A?")
    with pytest.raises(InstrumentError, match="closed"):
        fake.write("*RST")
