"""Scanner (switch) role: close and open channels; pick the channel wired to a node.

A scanner routes one voltmeter to many points. The instrument file's ``[channels]``
table maps channel ids to what they read (``101 = "b"`` is V(b) − V(reference node);
``104 = "c/e"`` is V(c) − V(e)). :meth:`Scanner.select` opens the channel it closed
last before closing the next (break before make) and waits ``settle_s``.
"""

from __future__ import annotations

import time
from collections.abc import Callable, Iterable
from typing import TYPE_CHECKING

from reconcile.errors import InputError

from reconcile.instruments.driver import Driver

if TYPE_CHECKING:
    from reconcile.instruments.profile import InstrumentProfile
    from reconcile.instruments.transport import Transport

__all__ = ["Scanner"]


class Scanner(Driver):
    """A relay scanner or switch unit.

    Default commands: ``ROUT:CLOS (@101)``, ``ROUT:OPEN (@101)`` (or ``(@101,102)``),
    ``ROUT:CLOS? (@101)``.

    Parameters
    ----------
    transport, profile, verify_settings
        See :class:`instruments.driver.Driver`.
    sleep : callable
        Waits a number of seconds (default :func:`time.sleep`; tests pass a recorder).
    """

    role = "scanner"

    def __init__(
        self,
        transport: Transport,
        profile: InstrumentProfile | None = None,
        *,
        verify_settings: bool = True,
        sleep: Callable[[float], None] = time.sleep,
    ) -> None:
        super().__init__(transport, profile, verify_settings=verify_settings)
        self._sleep = sleep
        self.closed_channel: str | None = None
        """The channel this driver closed last (``None`` if none or opened again)."""

    def close_channel(self, channel: str | int) -> None:
        """Close one channel."""
        ch = _channel_id(channel)
        self._set(self.command("close_channel", channel=ch))
        self.closed_channel = ch

    def open_channel(self, channel: str | int) -> None:
        """Open one channel."""
        self.open_channels([channel])

    def open_channels(self, channels: Iterable[str | int]) -> None:
        """Open several channels with one command, ``ROUT:OPEN (@101,102)``."""
        ids = [_channel_id(c) for c in channels]
        if not ids:
            raise InputError("no channels given to open", key="channels")
        self._set(self.command("open_channel", channel=",".join(ids)))
        if self.closed_channel in ids:
            self.closed_channel = None

    def is_closed(self, channel: str | int) -> bool:
        """Whether the instrument says ``channel`` is closed."""
        return self._query_bool("read_closed", channel=_channel_id(channel))

    def select(self, at: str) -> str:
        """Route the meter to ``at`` (a node, or ``a/b``) through the instrument file's map.

        Opens the channel closed last, closes the one for ``at``, waits ``settle_s``;
        does nothing if that channel is already the one closed.

        Returns
        -------
        str
            The channel closed.

        Raises
        ------
        InputError
            No instrument file, or no channel reads ``at``.
        """
        if self.profile is None:
            raise InputError("selecting a node needs an instrument file with [channels]",
                             key="channels")
        channel = self.profile.channel_for(at)
        if self.closed_channel == channel:
            return channel
        if self.closed_channel is not None:
            self.open_channel(self.closed_channel)
        self.close_channel(channel)
        if self.profile.settle_s > 0:
            self._sleep(self.profile.settle_s)
        return channel

    def release(self) -> None:
        """Open the channel closed last, if any."""
        if self.closed_channel is not None:
            self.open_channel(self.closed_channel)


def _channel_id(channel: str | int) -> str:
    if isinstance(channel, bool) or not isinstance(channel, str | int):
        raise InputError(f"a channel id is text or a whole number, got {channel!r}",
                         key="channel")
    text = str(channel).strip()
    if not text or any(c in text for c in "(),@ "):
        raise InputError(f"not a single channel id: {channel!r}", key="channel")
    return text
