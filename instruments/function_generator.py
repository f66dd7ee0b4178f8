"""Function generator role: a sine of given frequency, amplitude and offset; output on/off.

Amplitude is set in a unit the caller names: :meth:`FunctionGenerator.set_amplitude_vpp`
(volts peak-to-peak) or :meth:`FunctionGenerator.set_amplitude_vrms` (volts rms); each
first sends the unit command (``VOLT:UNIT VPP`` / ``VOLT:UNIT VRMS``) so the number can
never be read in the wrong unit. Most generators quote amplitude into their nominal
load (often 50 ohm): into a high-impedance input the voltage can be up to twice the
setting, so read the board's input with a voltmeter rather than trusting the setting.
"""

from __future__ import annotations

import math
from typing import Literal

from reconcile.errors import InputError

from reconcile.instruments import scpi
from reconcile.instruments.driver import Driver

__all__ = ["FunctionGenerator", "vrms_to_vpp_sine"]


def vrms_to_vpp_sine(vrms: float) -> float:
    """Peak-to-peak voltage of a sine with rms value ``vrms``: ``2·√2·Vrms``."""
    return 2.0 * math.sqrt(2.0) * vrms


class FunctionGenerator(Driver):
    """A function generator's first output.

    Default commands: ``FUNC SIN``, ``FREQ <hz>``, ``VOLT:UNIT VPP|VRMS`` then
    ``VOLT <amplitude>``, ``VOLT:OFFS <v>``, ``OUTP ON|OFF``, ``FREQ?``, ``OUTP?``.
    Another output is reached by overrides (e.g. ``set_frequency = "SOUR2:FREQ {value}"``).
    ``[limits] max_amplitude_vpp`` refuses larger amplitudes (a sine's Vrms is compared
    as 2·√2·Vrms).

    Parameters
    ----------
    transport, profile, verify_settings
        See :class:`instruments.driver.Driver`.
    """

    role = "function_generator"

    def set_sine(self) -> None:
        """Select the sine waveform."""
        self._set(self.command("set_function_sine"))

    def set_frequency(self, frequency_hz: float) -> None:
        """Set the frequency, Hz (> 0)."""
        self._set(*self._frequency(frequency_hz))

    def set_amplitude_vpp(self, vpp: float) -> None:
        """Set the amplitude in volts peak-to-peak (sends ``VOLT:UNIT VPP`` first)."""
        self._set(*self._amplitude(vpp, "Vpp"))

    def set_amplitude_vrms(self, vrms: float) -> None:
        """Set the amplitude in volts rms (sends ``VOLT:UNIT VRMS`` first)."""
        self._set(*self._amplitude(vrms, "Vrms"))

    def set_offset(self, offset_v: float) -> None:
        """Set the DC offset, V."""
        self._set(self.command("set_offset", value=scpi.format_number(offset_v, key="offset_v")))

    def output_on(self) -> None:
        """Switch the output on."""
        self._set(self.command("output_on"))

    def output_off(self) -> None:
        """Switch the output off."""
        self._set(self.command("output_off"))

    def configure_sine(
        self,
        frequency_hz: float,
        amplitude: float,
        unit: Literal["Vpp", "Vrms"],
        offset_v: float = 0.0,
    ) -> None:
        """Set up a sine in one go (output left as it is), then check the error queue once.

        Parameters
        ----------
        frequency_hz : float
            Frequency, Hz.
        amplitude : float
            Amplitude, in ``unit``.
        unit : {"Vpp", "Vrms"}
            Which unit ``amplitude`` is in; no default, so a caller always says.
        offset_v : float
            DC offset, V.
        """
        commands = [self.command("set_function_sine"), *self._frequency(frequency_hz)]
        commands += self._amplitude(amplitude, unit)
        commands.append(
            self.command("set_offset", value=scpi.format_number(offset_v, key="offset_v"))
        )
        self._set(*commands)

    def read_frequency(self) -> float:
        """The frequency set point, Hz."""
        return self._query_number("read_frequency")

    def read_output(self) -> bool:
        """Whether the output is on."""
        return self._query_bool("read_output")

    def _frequency(self, frequency_hz: float) -> list[str]:
        text = scpi.format_number(frequency_hz, key="frequency_hz")
        if float(frequency_hz) <= 0:
            raise InputError(f"frequency must be > 0 Hz, got {frequency_hz!r}",
                             key="frequency_hz")
        return [self.command("set_frequency", value=text)]

    def _amplitude(self, amplitude: float, unit: str) -> list[str]:
        if unit not in ("Vpp", "Vrms"):
            raise InputError(f"amplitude unit must be 'Vpp' or 'Vrms', got {unit!r}", key="unit")
        text = scpi.format_number(amplitude, key="amplitude")
        if float(amplitude) <= 0:
            raise InputError(f"amplitude must be > 0 {unit}, got {amplitude!r}", key="amplitude")
        vpp = float(amplitude) if unit == "Vpp" else vrms_to_vpp_sine(float(amplitude))
        self._limit("max_amplitude_vpp", vpp, "amplitude (peak-to-peak)", "V")
        unit_action = "set_amplitude_unit_vpp" if unit == "Vpp" else "set_amplitude_unit_vrms"
        return [self.command(unit_action), self.command("set_amplitude", value=text)]
