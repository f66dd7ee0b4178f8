"""The project's errors.

Every error the tool raises on purpose derives from :class:`ReconcileError` and from the
matching builtin, so callers may catch either. The command line has a single handler:
an :class:`InputError` becomes one line on stderr and exit code 2; any other
:class:`ReconcileError` one line and exit code 1.
"""

from __future__ import annotations


class ReconcileError(Exception):
    """Base of every error this project raises on purpose."""

    exit_code = 1


class InputError(ReconcileError, ValueError):
    """A file, a value string or an option the user gave is wrong.

    ``str()`` reads ``path:line: [key] message`` with whatever parts are known, so the
    user can go straight to the offending place.
    """

    exit_code = 2

    def __init__(
        self,
        message: str,
        *,
        path: str | None = None,
        line: int | None = None,
        key: str | None = None,
    ) -> None:
        self.message = message
        self.path = path
        self.line = line
        self.key = key
        super().__init__(self.__str__())

    def located(
        self, *, path: str | None = None, line: int | None = None, key: str | None = None
    ) -> InputError:
        """The same error with a location filled in where it was missing."""
        return type(self)(
            self.message,
            path=self.path or path,
            line=self.line if self.line is not None else line,
            key=self.key or key,
        )

    def __str__(self) -> str:
        where = ""
        if self.path:
            where = self.path
            if self.line is not None:
                where += f":{self.line}"
            where += ": "
        elif self.line is not None:
            where = f"line {self.line}: "
        key = f"[{self.key}] " if self.key else ""
        return f"{where}{key}{self.message}"


class InputErrors(InputError):
    """Several input problems found in one file, reported together."""

    def __init__(self, errors: list[InputError]) -> None:
        self.errors = list(errors)
        first = self.errors[0]
        more = len(self.errors) - 1
        message = first.message
        if more:
            message += f" (and {more} more problem{'s' if more > 1 else ''}: " + "; ".join(
                str(e) for e in self.errors[1:4]
            ) + (" ..." if more > 3 else "") + ")"
        super().__init__(message, path=first.path, line=first.line, key=first.key)


class SolveError(ReconcileError, RuntimeError):
    """The engine found no operating point for a board."""


class StoreError(ReconcileError, RuntimeError):
    """The session store cannot be opened or written."""


class InstrumentError(ReconcileError, RuntimeError):
    """An instrument did not answer, answered garbage, or reported an error."""


# ---------------------------------------------------------------------------- warnings
_INPUT_WARNINGS: list[str] = []
_COLLECTING = [False]


def collect_input_warnings() -> None:
    """Start noting input warnings for this process (the command line's entry point
    does; library callers read them from the result instead, e.g. ``Board.warnings``)."""
    _INPUT_WARNINGS.clear()
    _COLLECTING[0] = True


def warn_input(message: str) -> None:
    """Note a problem in the user's input that is not an error (a board that parses but
    looks wrong). Under the command line each is printed once on stderr and added to the
    JSON object's ``warnings``; otherwise nothing is kept here."""
    if _COLLECTING[0] and message not in _INPUT_WARNINGS:
        _INPUT_WARNINGS.append(message)


def input_warnings() -> list[str]:
    """The input warnings noted so far by this command, in order (a copy)."""
    return list(_INPUT_WARNINGS)
