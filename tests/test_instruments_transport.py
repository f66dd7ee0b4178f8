"""VisaTransport: timeouts, retries and errors; end to end through pyvisa and pyvisa-sim.

The pyvisa-sim bench is tests/instruments_sim_bench.yaml (timeouts set to 100 ms, since
a query the simulation does not know waits out the whole timeout).
"""

from __future__ import annotations

import os
import shutil
import time

import pytest

from reconcile.instruments import scpi
from reconcile.instruments import transport as transport_module
from reconcile.instruments.ac_voltmeter import AcVoltmeter
from reconcile.instruments.dc_voltmeter import DcVoltmeter
from reconcile.instruments.power_supply import PowerSupply
from reconcile.instruments.profile import load_profile
from reconcile.instruments.transport import Transport, VisaTransport, check_backend, open_transport
from reconcile.errors import InputError, InstrumentError

HERE = os.path.dirname(os.path.abspath(__file__))
SIM = os.path.join(HERE, "instruments_sim_bench.yaml")
SIM_BACKEND = f"{SIM}@sim"
DMM = "TCPIP0::10.0.0.5::INSTR"
SUPPLY = "TCPIP0::10.0.0.6::INSTR"


def _visa_error(code_name: str) -> Exception:
    from pyvisa.constants import StatusCode
    from pyvisa.errors import VisaIOError

    return VisaIOError(getattr(StatusCode, code_name))


class ScriptedVisaResource:
    """Stands in for a pyvisa resource: raises the given errors in turn, then answers."""

    def __init__(self, reply: str = "+1.62E+00", errors: list[Exception] | None = None) -> None:
        self.reply = reply
        self.errors = list(errors or [])
        self.queries: list[str] = []
        self.writes: list[str] = []
        self.clears = 0
        self.closed = False
        self.timeout = None

    def query(self, cmd: str) -> str:
        self.queries.append(cmd)
        if self.errors:
            raise self.errors.pop(0)
        return self.reply

    def write(self, cmd: str) -> None:
        self.writes.append(cmd)
        if self.errors:
            raise self.errors.pop(0)

    def clear(self) -> None:
        self.clears += 1

    def close(self) -> None:
        self.closed = True


def test_timeout_then_answer_is_retried_after_a_device_clear():
    visa = ScriptedVisaResource("+1.62E+00\r", [_visa_error("error_timeout")])
    link = VisaTransport(visa, DMM, timeout_s=2.0, retries=1)
    assert isinstance(link, Transport)
    assert visa.timeout == 2000.0  # pyvisa counts in ms
    assert link.query("MEAS:VOLT:DC?") == "+1.62E+00"
    assert visa.queries == ["MEAS:VOLT:DC?"] * 2
    assert visa.clears == 1


def test_timeout_on_every_try_names_resource_command_timeout_and_tries():
    visa = ScriptedVisaResource(errors=[_visa_error("error_timeout")] * 2)
    link = VisaTransport(visa, DMM, timeout_s=2.0, retries=1)
    with pytest.raises(InstrumentError) as info:
        link.query("MEAS:VOLT:DC?")
    assert str(info.value) == (
        "TCPIP0::10.0.0.5::INSTR did not answer 'MEAS:VOLT:DC?' within 2 s (tried 2 times)")


def test_no_retries_means_one_try():
    visa = ScriptedVisaResource(errors=[_visa_error("error_timeout")])
    with pytest.raises(InstrumentError, match=r"within 0\.5 s \(tried 1 time\)"):
        VisaTransport(visa, DMM, timeout_s=0.5, retries=0).query("*IDN?")
    assert visa.clears == 0


def test_other_visa_errors_are_not_retried():
    visa = ScriptedVisaResource(errors=[_visa_error("error_connection_lost")])
    with pytest.raises(InstrumentError) as info:
        VisaTransport(visa, DMM, retries=3).query("*IDN?")
    assert "TCPIP0::10.0.0.5::INSTR" in str(info.value) and "'*IDN?'" in str(info.value)
    assert visa.queries == ["*IDN?"]


def test_write_timeout_names_resource_and_command():
    visa = ScriptedVisaResource(errors=[_visa_error("error_timeout")])
    with pytest.raises(InstrumentError, match=r"did not accept 'OUTP ON' within 2 s"):
        VisaTransport(visa, SUPPLY).write("OUTP ON")


def test_close_is_idempotent_and_closes_owned_manager():
    class Manager:
        closed = 0

        def close(self) -> None:
            Manager.closed += 1

    visa = ScriptedVisaResource()
    link = VisaTransport(visa, DMM, resource_manager=Manager())
    link.close()
    link.close()
    assert visa.closed and Manager.closed == 1
    with pytest.raises(InstrumentError, match="closed"):
        link.query("*IDN?")


@pytest.mark.parametrize(("kwargs", "key"), [({"timeout_s": 0}, "timeout_s"),
                                              ({"retries": -1}, "retries")])
def test_bad_timeout_or_retries(kwargs, key):
    with pytest.raises(InputError) as info:
        VisaTransport(ScriptedVisaResource(), DMM, **kwargs)
    assert info.value.key == key


def test_py_backend_without_pyvisa_py_says_how_to_install(monkeypatch):
    monkeypatch.setattr(transport_module, "_pyvisa_py_installed", lambda: False)
    with pytest.raises(InstrumentError, match="pip install pyvisa-py"):
        open_transport(DMM, backend="@py")
    monkeypatch.setattr(transport_module, "_pyvisa_py_installed", lambda: True)
    assert check_backend("@py") == "@py"


@pytest.mark.parametrize(
    ("backend", "expected"),
    [("@ivi", "@ivi"), ("", ""), ("@sim", "@sim"), (SIM_BACKEND, SIM_BACKEND),
     ("/opt/visa/libvisa.so", "/opt/visa/libvisa.so")],
)
def test_backend_forms(backend, expected):
    assert check_backend(backend) == expected


@pytest.mark.parametrize("backend", ["nosuch.yaml@sim", "@pyvisa"])
def test_bad_backends(backend):
    with pytest.raises(InputError) as info:
        check_backend(backend)
    assert info.value.key == "backend"


def test_end_to_end_through_pyvisa_sim_dmm():
    link = open_transport(DMM, backend=SIM_BACKEND, timeout_s=0.1, retries=1)
    try:
        dmm = DcVoltmeter(link)
        assert dmm.identify().model == "DM-65 (invented)"
        assert dmm.read_dc_volts() == 1.62
        assert dmm.read_dc_volts(10) == 1.6201
        dmm.wait_complete()
        dmm.clear()
        # SCPI-1999 (from memory): +9.9E37 marks an overload
        with pytest.raises(InstrumentError, match="'MEAS:VOLT:AC\\? 0.1'.*overload"):
            AcVoltmeter(link).read_ac_volts(0.1)
    finally:
        link.close()


def test_end_to_end_timeout_through_pyvisa_sim():
    link = open_transport(DMM, backend=SIM_BACKEND, timeout_s=0.1, retries=1)
    try:
        scpi.read_errors(link)  # the simulated bench is shared in-process: start empty
        start = time.perf_counter()
        with pytest.raises(InstrumentError) as info:
            link.query("MEAS:RES?")
        elapsed = time.perf_counter() - start
        assert str(info.value) == (
            "TCPIP0::10.0.0.5::INSTR did not answer 'MEAS:RES?' within 0.1 s (tried 2 times)")
        assert 0.15 < elapsed < 1.5  # two tries of 0.1 s, not the 2 s default
        # the simulated queue now holds the two unknown-command errors (SCPI -113)
        with pytest.raises(InstrumentError, match='2 errors: -113 "Undefined header"; -113'):
            DcVoltmeter(link).check_errors()
    finally:
        link.close()


def test_end_to_end_supply_settings_and_error_queue():
    supply = PowerSupply(open_transport(SUPPLY, backend=SIM_BACKEND, timeout_s=0.1))
    try:
        supply.set_voltage(5)
        assert supply.read_voltage_setting() == 5.0
        assert supply.read_current() == 5.42e-4
        with pytest.raises(InstrumentError, match=r"after 'VOLT 50': -222 \"Data out of range\""):
            supply.set_voltage(50)
        assert supply.read_voltage_setting() == 5.0  # refused, unchanged
    finally:
        supply.close()


def test_instrument_file_with_relative_sim_backend(tmp_path):
    shutil.copy(SIM, tmp_path / "bench.yaml")
    (tmp_path / "dmm.toml").write_text(
        '[instrument]\nrole = "dc_voltmeter"\n'
        f'resource = "{DMM}"\nbackend = "bench.yaml@sim"\ntimeout_s = 0.1\n',
        encoding="utf-8",
    )
    profile = load_profile(tmp_path / "dmm.toml")
    assert profile.backend == f"{tmp_path / 'bench.yaml'}@sim"
    with DcVoltmeter.from_profile(profile) as dmm:
        assert dmm.read_dc_volts() == 1.62
