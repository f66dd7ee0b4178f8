"""Power supply role: read back voltage and current; change settings only when asked.

Nothing here changes the supply unless the method's name says so (``set_voltage``,
``set_current_limit``, ``output_on``, ``output_off``); reading never switches anything.
A multi-output supply selects its output with command overrides, e.g.
``read_current = "INST:NSEL 2;:MEAS:CURR?"``.
"""

from __future__ import annotations

from reconcile.instruments import scpi
from reconcile.instruments.driver import Driver

__all__ = ["PowerSupply"]


class PowerSupply(Driver):
    """A DC bench supply.

    Default commands: ``MEAS:VOLT?``, ``MEAS:CURR?`` (actual output), ``VOLT?``,
    ``CURR?`` (set points), ``OUTP?``; settings ``VOLT <v>``, ``CURR <a>``,
    ``OUTP ON|OFF``, each followed by an error-queue check. ``[limits]
    max_voltage_v`` / ``max_current_a`` in the instrument file refuse larger set points.

    Parameters
    ----------
    transport, profile, verify_settings
        See :class:`instruments.driver.Driver`.
    """

    role = "power_supply"

    def read_voltage(self) -> float:
        """Measured output voltage, V."""
        return self._query_number("read_voltage")

    def read_current(self) -> float:
        """Measured output current, A (what the supply delivers into the board)."""
        return self._query_number("read_current")

    def read_voltage_setting(self) -> float:
        """The voltage set point, V."""
        return self._query_number("read_voltage_setting")

    def read_current_limit(self) -> float:
        """The current limit set point, A."""
        return self._query_number("read_current_limit")

    def read_output(self) -> bool:
        """Whether the output is on."""
        return self._query_bool("read_output")

    def set_voltage(self, volts: float) -> None:
        """Set the output voltage, V.

        Raises
        ------
        InputError
            Not a finite number, or above the file's ``max_voltage_v``.
        InstrumentError
            The supply reported an error.
        """
        text = scpi.format_number(volts, key="volts")
        self._limit("max_voltage_v", float(volts), "voltage", "V")
        self._set(self.command("set_voltage", value=text))

    def set_current_limit(self, amps: float) -> None:
        """Set the current limit, A.

        Raises
        ------
        InputError
            Not a finite number, or above the file's ``max_current_a``.
        InstrumentError
            The supply reported an error.
        """
        text = scpi.format_number(amps, key="amps")
        self._limit("max_current_a", float(amps), "current limit", "A")
        self._set(self.command("set_current_limit", value=text))

    def output_on(self) -> None:
        """Switch the output on."""
        self._set(self.command("output_on"))

    def output_off(self) -> None:
        """Switch the output off."""
        self._set(self.command("output_off"))

    def standard_uncertainty_voltage(self, reading_v: float) -> float | None:
        """Standard uncertainty of a voltage read-back, from ``[accuracy.dc_volts]``, V."""
        return self._uncertainty("dc_volts", reading_v, None)

    def standard_uncertainty_current(self, reading_a: float) -> float | None:
        """Standard uncertainty of a current read-back, from ``[accuracy.dc_current]``, A."""
        return self._uncertainty("dc_current", reading_a, None)
