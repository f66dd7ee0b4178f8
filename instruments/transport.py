"""The text link to one instrument: the :class:`Transport` protocol and its VISA adapter.

Everything above this module (SCPI helpers, drivers, the capture step) talks to an
instrument only through :class:`Transport`: ``write`` a command, ``query`` a command and
get the reply text, ``close``. Tests and the simulated bench inject
:class:`instruments.fake.FakeTransport`; real instruments go through
:func:`open_transport`, which wraps a pyvisa resource in :class:`VisaTransport`.

pyvisa is imported inside the functions that need it, never at import time.

Backends (the ``backend`` argument of :func:`open_transport`):

``"@py"``
    pyvisa-py, pure Python (TCP/IP, USB-TMC, serial, GPIB via linux-gpib). Not a
    dependency of this project: ``pip install pyvisa-py``.
``"@ivi"``
    the VISA library installed on the system by an instrument vendor.
``"@sim"`` or ``"path/to/bench.yaml@sim"``
    pyvisa-sim, a simulated instrument described in a YAML file.
a file path ending in ``.so``, ``.dll`` or ``.dylib``
    a specific VISA library.
"""

from __future__ import annotations

import importlib.util
import os
from typing import Any, Protocol, runtime_checkable

from reconcile.errors import InputError, InstrumentError

__all__ = [
    "Transport",
    "VisaTransport",
    "open_transport",
    "timeout_message",
    "check_backend",
]

_LIBRARY_SUFFIXES = (".so", ".dll", ".dylib")


@runtime_checkable
class Transport(Protocol):
    """A text link to one instrument.

    Attributes
    ----------
    resource : str
        The address the link goes to (a VISA resource string, or a made-up name for a
        fake); every error message names it.
    """

    resource: str

    def write(self, cmd: str) -> None:
        """Send ``cmd``; expect no reply."""
        ...

    def query(self, cmd: str) -> str:
        """Send ``cmd`` and return the reply, stripped of termination and whitespace."""
        ...

    def close(self) -> None:
        """Release the link. Closing twice is harmless."""
        ...


def timeout_message(resource: str, cmd: str, timeout_s: float, tries: int) -> str:
    """The one wording of a query that got no reply.

    Parameters
    ----------
    resource : str
        Instrument address.
    cmd : str
        The command that went unanswered.
    timeout_s : float
        Time allowed for each try, s.
    tries : int
        How many times the command was sent.

    Returns
    -------
    str
        e.g. ``TCPIP0::10.0.0.5::INSTR did not answer 'MEAS:VOLT:DC?' within 2 s
        (tried 2 times)``.
    """
    times = "time" if tries == 1 else "times"
    return f"{resource} did not answer {cmd!r} within {timeout_s:g} s (tried {tries} {times})"


class VisaTransport:
    """:class:`Transport` over an open pyvisa message-based resource.

    A query that times out is sent again, up to ``retries`` more times, after a device
    clear (so that a late reply to the first try cannot be read as the reply to a later
    command). Any other VISA error is reported at once.

    Parameters
    ----------
    visa_resource : pyvisa.resources.MessageBasedResource
        An open resource (anything with ``write``, ``query``, ``clear``, ``close`` and a
        ``timeout`` in ms works, which is how the retry logic is tested).
    resource : str
        The resource string, for messages.
    timeout_s : float
        Time allowed for each read or write, s.
    retries : int
        Extra tries of a query after a timeout (0 = try once).
    resource_manager : pyvisa.ResourceManager, optional
        Closed with the transport when given (the transport owns it).
    """

    def __init__(
        self,
        visa_resource: Any,
        resource: str,
        *,
        timeout_s: float = 2.0,
        retries: int = 1,
        resource_manager: Any | None = None,
    ) -> None:
        if not timeout_s > 0:
            raise InputError(f"timeout must be a positive number of seconds, got {timeout_s!r}",
                             key="timeout_s")
        if retries < 0:
            raise InputError(f"retries must be 0 or more, got {retries!r}", key="retries")
        self.resource = resource
        self.timeout_s = float(timeout_s)
        self.retries = int(retries)
        self._visa = visa_resource
        self._rm = resource_manager
        self._closed = False
        self._visa.timeout = self.timeout_s * 1000.0  # pyvisa counts in ms

    def write(self, cmd: str) -> None:
        """Send ``cmd``.

        Raises
        ------
        InstrumentError
            The write timed out or failed; the message names the resource and command.
        """
        self._check_open(cmd)
        try:
            self._visa.write(cmd)
        except visa_failures() as exc:
            if _is_timeout(exc):
                raise InstrumentError(
                    f"{self.resource} did not accept {cmd!r} within {self.timeout_s:g} s"
                ) from exc
            raise InstrumentError(f"{self.resource}: sending {cmd!r} failed: {exc}") from exc

    def query(self, cmd: str) -> str:
        """Send ``cmd`` and return the stripped reply, retrying after timeouts.

        Raises
        ------
        InstrumentError
            No reply after ``1 + retries`` tries, or another VISA failure.
        """
        self._check_open(cmd)
        tries = 1 + self.retries
        last: BaseException | None = None
        for attempt in range(tries):
            if attempt:
                self._clear_quietly()
            try:
                reply = self._visa.query(cmd)
            except visa_failures() as exc:
                if not _is_timeout(exc):
                    raise InstrumentError(
                        f"{self.resource}: query {cmd!r} failed: {exc}"
                    ) from exc
                last = exc
                continue
            return str(reply).strip()
        raise InstrumentError(
            timeout_message(self.resource, cmd, self.timeout_s, tries)
        ) from last

    def close(self) -> None:
        """Close the resource (and the resource manager this transport owns)."""
        if self._closed:
            return
        self._closed = True
        try:
            self._visa.close()
        finally:
            if self._rm is not None:
                self._rm.close()

    def _check_open(self, cmd: str) -> None:
        if self._closed:
            raise InstrumentError(f"{self.resource}: cannot send {cmd!r}, the link is closed")

    def _clear_quietly(self) -> None:
        try:
            self._visa.clear()
        # a failed clear (or a backend without device clear) must not hide the timeout
        except (*visa_failures(), NotImplementedError):
            pass

    def __repr__(self) -> str:
        return f"VisaTransport({self.resource!r}, timeout_s={self.timeout_s:g})"


def visa_failures() -> tuple[type[BaseException], ...]:
    """What a VISA call raises on a known failure: pyvisa's errors (when pyvisa is
    installed) and the operating system's (sockets, serial ports)."""
    try:
        from pyvisa.errors import Error
    except ImportError:
        return (OSError,)
    return (Error, OSError)


def _is_timeout(exc: BaseException) -> bool:
    """Whether ``exc`` is a VISA timeout (VI_ERROR_TMO)."""
    code = getattr(exc, "error_code", None)
    if code is None:
        return False
    from pyvisa.constants import StatusCode

    return code == StatusCode.error_timeout


def _pyvisa_py_installed() -> bool:
    return importlib.util.find_spec("pyvisa_py") is not None


def check_backend(backend: str) -> str:
    """Check a backend string and return the form pyvisa takes.

    Parameters
    ----------
    backend : str
        ``"@py"``, ``"@ivi"``, ``"@sim"``, ``"bench.yaml@sim"`` or a path to a VISA library.

    Returns
    -------
    str
        The argument for ``pyvisa.ResourceManager``.

    Raises
    ------
    InputError
        The string is none of the accepted forms, or the simulation file is missing.
    InstrumentError
        ``"@py"`` was chosen and pyvisa-py is not installed.
    """
    if backend == "@py":
        if not _pyvisa_py_installed():
            raise InstrumentError(
                "backend '@py' needs the pure-Python VISA backend, which is not installed: "
                "pip install pyvisa-py (or choose backend '@ivi' for a vendor VISA library)"
            )
        return "@py"
    if backend == "":
        return ""  # pyvisa's default: PYVISA_LIBRARY or .pyvisarc, else the IVI library
    if backend == "@ivi":
        return "@ivi"
    if backend == "@sim":
        return "@sim"
    if backend.endswith("@sim"):
        path = backend[: -len("@sim")]
        if not os.path.isfile(path):
            raise InputError("simulated bench file not found", path=path, key="backend")
        return backend
    if backend.lower().endswith(_LIBRARY_SUFFIXES):
        return backend
    raise InputError(
        f"unknown backend {backend!r}; expected '@py', '@ivi', '@sim', "
        "'path/to/bench.yaml@sim' or the path of a VISA library",
        key="backend",
    )


def open_transport(
    resource: str,
    backend: str = "@py",
    timeout_s: float = 2.0,
    retries: int = 1,
    read_termination: str = "\n",
    write_termination: str = "\n",
) -> VisaTransport:
    """Open one instrument through pyvisa.

    Parameters
    ----------
    resource : str
        VISA resource string, e.g. ``TCPIP0::10.0.0.5::INSTR``,
        ``USB0::0x1234::0x5678::SN01::INSTR``, ``GPIB0::22::INSTR``, ``ASRL/dev/ttyUSB0::INSTR``.
    backend : str
        See the module docstring; default ``"@py"`` (pyvisa-py, installed separately).
    timeout_s : float
        Time allowed for each read or write, s.
    retries : int
        Extra tries of a query that timed out.
    read_termination, write_termination : str
        End-of-message characters.

    Returns
    -------
    VisaTransport
        Owns its resource manager; close it when done.

    Raises
    ------
    InstrumentError
        No VISA library, or the instrument cannot be opened.
    InputError
        A malformed resource string or backend.
    """
    library = check_backend(backend)
    import pyvisa
    from pyvisa.rname import InvalidResourceName

    try:
        rm = pyvisa.ResourceManager(library)
    except (OSError, ValueError) as exc:
        raise InstrumentError(
            f"cannot load VISA backend {backend!r} for {resource}: {exc}".rstrip(": \n")
        ) from exc
    try:
        visa = rm.open_resource(
            resource,
            read_termination=read_termination,
            write_termination=write_termination,
        )
    except InvalidResourceName as exc:
        rm.close()
        raise InputError(f"malformed VISA resource string: {exc}", key="resource") from exc
    except (*visa_failures(), ValueError) as exc:
        rm.close()
        raise InstrumentError(f"cannot open {resource} with backend {backend!r}: {exc}") from exc
    if not (hasattr(visa, "query") and hasattr(visa, "write")):
        visa.close()
        rm.close()
        raise InstrumentError(
            f"{resource} is not a message-based instrument (no text commands); "
            "use an ::INSTR or ::SOCKET resource"
        )
    try:
        return VisaTransport(
            visa, resource, timeout_s=timeout_s, retries=retries, resource_manager=rm
        )
    except BaseException:
        visa.close()
        rm.close()
        raise
