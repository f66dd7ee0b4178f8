"""AC voltmeter role: one AC rms voltage reading, autorange or on a chosen range."""

from __future__ import annotations

from reconcile.instruments.driver import Driver

__all__ = ["AcVoltmeter"]


class AcVoltmeter(Driver):
    """An AC rms voltmeter (a DMM's AC volts function).

    Default commands: ``MEAS:VOLT:AC?`` (autorange) and ``MEAS:VOLT:AC? <range>``;
    override ``read_ac_volts`` / ``read_ac_volts_range`` in the instrument file. A
    meter's AC accuracy depends on frequency: give in ``[accuracy.ac_volts]`` the
    specification of the band the test frequency falls in.

    Parameters
    ----------
    transport, profile, verify_settings
        See :class:`instruments.driver.Driver`.
    """

    role = "ac_voltmeter"

    def read_ac_volts(self, range_v: float | None = None) -> float:
        """One AC rms voltage reading.

        Parameters
        ----------
        range_v : float, optional
            The largest rms voltage expected, V; autorange when omitted.

        Returns
        -------
        float
            Volts rms.

        Raises
        ------
        InstrumentError
            No answer, a non-numeric answer, or an overload.
        """
        if range_v is None:
            return self._query_number("read_ac_volts")
        return self._query_number(
            "read_ac_volts_range", range=self._positive(range_v, "range_v")
        )

    def standard_uncertainty(self, reading_v: float, range_v: float | None = None) -> float | None:
        """Standard uncertainty of a reading from ``[accuracy.ac_volts]``, V rms (or ``None``)."""
        return self._uncertainty("ac_volts", reading_v, range_v)
