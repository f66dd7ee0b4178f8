"""A scripted :class:`~instruments.transport.Transport` for tests and the simulated bench.

It answers queries from a table or a function, records every text sent, and can be told
to stay silent (a timeout) or to answer garbage on chosen commands. It never touches
pyvisa.
"""

from __future__ import annotations

from collections.abc import Callable, Iterable, Mapping, Sequence

from reconcile.errors import InstrumentError

from reconcile.instruments.transport import timeout_message

__all__ = ["FakeTransport", "GARBAGE_REPLY"]

GARBAGE_REPLY = "#\x15?garbled"
"""What a command listed in ``garbage_on`` answers unless told otherwise."""

Reply = str | Sequence[str] | Callable[[str], str]
"""One programmed reply: a fixed text, texts given in turn (the last repeats), or a
function of the command."""


class FakeTransport:
    """An instrument that answers from a script.

    Parameters
    ----------
    replies : mapping or callable, optional
        Either a mapping ``command -> reply`` (a string; a sequence of strings given in
        turn, the last one repeating; or a function of the command), or one function
        ``command -> reply`` for every query, which may return ``None`` for "no reply".
        A query with no reply behaves like a timeout.
    resource : str
        The name used in messages.
    timeout_on : iterable of str
        Commands that are never answered.
    garbage_on : mapping or iterable of str
        Commands answered with garbage: a mapping ``command -> reply``, or commands that
        answer :data:`GARBAGE_REPLY`.
    on_write : callable, optional
        Called with each written command (lets a simulated bench keep state, e.g. which
        scanner channel is closed).
    timeout_s : float
        The timeout quoted in messages, s (the fake never waits).

    Attributes
    ----------
    sent : list of str
        Every text sent, writes and queries, in order.
    writes : list of str
        The written commands.
    queries : list of str
        The queried commands.
    closed : bool
        Whether :meth:`close` was called.
    """

    def __init__(
        self,
        replies: Mapping[str, Reply] | Callable[[str], str | None] | None = None,
        *,
        resource: str = "FAKE::INSTR",
        timeout_on: Iterable[str] = (),
        garbage_on: Mapping[str, str] | Iterable[str] = (),
        on_write: Callable[[str], None] | None = None,
        timeout_s: float = 2.0,
    ) -> None:
        self.resource = resource
        self.timeout_s = timeout_s
        self._function: Callable[[str], str | None] | None = None
        self._table: dict[str, Reply] = {}
        if callable(replies):
            self._function = replies
        elif replies is not None:
            self._table = dict(replies)
        self._turn: dict[str, int] = {}
        self._timeout_on: set[str] = set(timeout_on)
        self._garbage: dict[str, str] = {}
        self.garble(garbage_on)
        self._on_write = on_write
        self.sent: list[str] = []
        self.writes: list[str] = []
        self.queries: list[str] = []
        self.closed = False

    def time_out(self, *commands: str) -> None:
        """Make ``commands`` go unanswered from now on."""
        self._timeout_on.update(commands)

    def garble(self, commands: Mapping[str, str] | Iterable[str] | str) -> None:
        """Make ``commands`` answer garbage from now on."""
        if isinstance(commands, str):
            commands = [commands]
        if isinstance(commands, Mapping):
            self._garbage.update(commands)
        else:
            self._garbage.update({c: GARBAGE_REPLY for c in commands})

    def write(self, cmd: str) -> None:
        """Record ``cmd``."""
        self._check_open(cmd)
        self.sent.append(cmd)
        self.writes.append(cmd)
        if self._on_write is not None:
            self._on_write(cmd)

    def query(self, cmd: str) -> str:
        """Record ``cmd`` and return its scripted reply.

        Raises
        ------
        InstrumentError
            The command is set to time out or has no reply programmed.
        """
        self._check_open(cmd)
        self.sent.append(cmd)
        self.queries.append(cmd)
        if cmd in self._timeout_on:
            raise InstrumentError(timeout_message(self.resource, cmd, self.timeout_s, 1))
        if cmd in self._garbage:
            return self._garbage[cmd]
        reply = self._reply(cmd)
        if reply is None:
            raise InstrumentError(
                timeout_message(self.resource, cmd, self.timeout_s, 1)
                + " (the fake has no reply for it)"
            )
        return reply.strip()

    def close(self) -> None:
        """Mark the fake closed; later writes and queries fail."""
        self.closed = True

    def _reply(self, cmd: str) -> str | None:
        if self._function is not None:
            return self._function(cmd)
        if cmd not in self._table:
            return None
        reply = self._table[cmd]
        if isinstance(reply, str):
            return reply
        if callable(reply):
            return reply(cmd)
        turn = self._turn.get(cmd, 0)
        self._turn[cmd] = turn + 1
        items = list(reply)
        if not items:
            return None
        return items[min(turn, len(items) - 1)]

    def _check_open(self, cmd: str) -> None:
        if self.closed:
            raise InstrumentError(f"{self.resource}: cannot send {cmd!r}, the link is closed")

    def __repr__(self) -> str:
        return f"FakeTransport({self.resource!r}, {len(self.sent)} sent)"
