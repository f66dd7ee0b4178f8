"""What every role driver shares: a transport, an optional instrument file, the command table.

A driver never sends anything on its own: constructing one sends nothing, and each
method sends exactly the commands it documents. Commands come from
:data:`instruments.commands.ROLE_ACTIONS` unless the instrument file overrides them.
Setters write, then read the error queue (``SYST:ERR?``) so a refused setting is
reported at once; pass ``verify_settings=False`` for an instrument with no error queue.
"""

from __future__ import annotations

from typing import TYPE_CHECKING, Any, ClassVar, Self

from reconcile.errors import InputError

from reconcile.instruments import scpi
from reconcile.instruments.commands import actions_for

if TYPE_CHECKING:
    from reconcile.data.accuracy import RangeTable

    from reconcile.instruments.profile import InstrumentProfile
    from reconcile.instruments.transport import Transport

__all__ = ["Driver"]


class Driver:
    """Base of the role drivers.

    Parameters
    ----------
    transport : Transport
        The link to the instrument (a :class:`~instruments.fake.FakeTransport` in tests).
    profile : InstrumentProfile, optional
        The instrument file: command overrides, accuracy, limits.
    verify_settings : bool
        Read the error queue after each setting (default True).

    Raises
    ------
    InputError
        The instrument file does not give this driver's role.
    """

    role: ClassVar[str] = ""

    def __init__(
        self,
        transport: Transport,
        profile: InstrumentProfile | None = None,
        *,
        verify_settings: bool = True,
    ) -> None:
        if profile is not None and self.role not in profile.roles:
            raise InputError(
                f"this instrument's roles are {', '.join(profile.roles)}; "
                f"it cannot be used as a {self.role}",
                path=profile.path,
                key="instrument.role",
            )
        self.transport = transport
        self.profile = profile
        self.verify_settings = verify_settings
        self._actions = actions_for([self.role])

    @classmethod
    def from_profile(cls, profile: InstrumentProfile, **kwargs: Any) -> Self:
        """Open the instrument an instrument file describes (through pyvisa)."""
        return cls(profile.open(), profile, **kwargs)

    @property
    def resource(self) -> str:
        """The instrument's address."""
        return self.transport.resource

    def command(self, action: str, **fields: str) -> str:
        """The text sent for ``action`` with ``fields`` filled in."""
        default = self._actions[action].default
        template = self.profile.command(action, default) if self.profile else default
        return template.format(**fields)

    def _query(self, action: str, **fields: str) -> str:
        return self.transport.query(self.command(action, **fields))

    def _query_number(self, action: str, **fields: str) -> float:
        cmd = self.command(action, **fields)
        return scpi.parse_number(self.transport.query(cmd), resource=self.resource, command=cmd)

    def _query_bool(self, action: str, **fields: str) -> bool:
        cmd = self.command(action, **fields)
        return scpi.parse_bool(self.transport.query(cmd), resource=self.resource, command=cmd)

    def _set(self, *commands: str) -> None:
        """Write ``commands`` (already formatted); then check the error queue."""
        for cmd in commands:
            self.transport.write(cmd)
        if self.verify_settings:
            scpi.check_errors(self.transport, after=commands, command=self.command("read_error"))

    @staticmethod
    def _positive(value: float, key: str) -> str:
        """``value`` as SCPI text, refusing anything but a finite number > 0."""
        text = scpi.format_number(value, key=key)
        if float(value) <= 0:
            raise InputError(f"must be > 0, got {value!r}", key=key)
        return text

    def _limit(self, key: str, value: float, what: str, unit: str) -> None:
        if self.profile is None or key not in self.profile.limits:
            return
        top = self.profile.limits[key]
        if abs(value) > top:
            raise InputError(
                f"{what} {value:g} {unit} is above this instrument's limit {key} = {top:g}",
                path=self.profile.path,
                key=f"limits.{key}",
            )

    def identify(self) -> scpi.Identity:
        """``*IDN?``, parsed."""
        return scpi.identify(self.transport, command=self.command("identify"))

    def reset(self) -> None:
        """``*RST``."""
        scpi.reset(self.transport, command=self.command("reset"))

    def clear(self) -> None:
        """``*CLS``."""
        scpi.clear(self.transport, command=self.command("clear"))

    def wait_complete(self) -> None:
        """``*OPC?`` until it answers 1."""
        scpi.wait_complete(self.transport, command=self.command("wait_complete"))

    def check_errors(self) -> None:
        """Read the error queue; raise :class:`InstrumentError` listing any errors."""
        scpi.check_errors(self.transport, command=self.command("read_error"))

    def accuracy(self, function: str) -> RangeTable | None:
        """The instrument file's accuracy table for ``function``, if any."""
        return self.profile.accuracy_for(function) if self.profile else None

    def _uncertainty(self, function: str, reading: float, range_: float | None) -> float | None:
        table = self.accuracy(function)
        if table is None:
            return None
        if range_ is not None:
            # the instrument takes the smallest range that holds the value asked for
            bigger = [fs for fs in table.full_scales if fs >= abs(range_) * (1 - 1e-9)]
            if not bigger:
                raise InputError(
                    f"range {range_:g} is beyond every {function} range in the instrument file",
                    path=self.profile.path if self.profile else None,
                    key=f"accuracy.{function}",
                )
            range_ = bigger[0]
        return table.standard_uncertainty(reading, range_)

    def close(self) -> None:
        """Close the transport."""
        self.transport.close()

    def __enter__(self) -> Self:
        return self

    def __exit__(self, *_exc: object) -> None:
        self.close()

    def __repr__(self) -> str:
        return f"{type(self).__name__}({self.resource!r})"
