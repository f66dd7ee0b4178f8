"""DC voltmeter role: one DC voltage reading, autorange or on a chosen range."""

from __future__ import annotations

from reconcile.instruments.driver import Driver

__all__ = ["DcVoltmeter"]


class DcVoltmeter(Driver):
    """A DC voltmeter (a DMM's DC volts function).

    Default commands: ``MEAS:VOLT:DC?`` (autorange) and ``MEAS:VOLT:DC? <range>``;
    override ``read_dc_volts`` / ``read_dc_volts_range`` in the instrument file.

    Parameters
    ----------
    transport, profile, verify_settings
        See :class:`instruments.driver.Driver`.
    """

    role = "dc_voltmeter"

    def read_dc_volts(self, range_v: float | None = None) -> float:
        """One DC voltage reading.

        Parameters
        ----------
        range_v : float, optional
            The largest voltage expected, V; the meter takes the smallest range that
            holds it. Autorange when omitted.

        Returns
        -------
        float
            Volts.

        Raises
        ------
        InstrumentError
            No answer, a non-numeric answer, or an overload; the message names the
            resource, the command and the reply.
        """
        if range_v is None:
            return self._query_number("read_dc_volts")
        return self._query_number(
            "read_dc_volts_range", range=self._positive(range_v, "range_v")
        )

    def standard_uncertainty(self, reading_v: float, range_v: float | None = None) -> float | None:
        """Standard uncertainty of a reading from the file's ``[accuracy.dc_volts]``, V.

        The range is the one :meth:`read_dc_volts` was given (mapped to the smallest
        full scale that holds it) or, when autoranging, picked from the reading
        (:meth:`reconcile.accuracy.RangeTable.select_range`). ``None`` when the
        instrument file gives no accuracy.
        """
        return self._uncertainty("dc_volts", reading_v, range_v)
