"""Prior weights over fault kinds for :mod:`reconcile.diagnosis`.

A weight is the prior odds of one hypothesis of that kind, relative to the others: the
prior probability of "part X has fault k" is proportional to ``weights[k]``, and that of
"nothing is wrong" to ``weights["none"]``. Only ratios matter.

The defaults are **invented**: common-practice guesses of how often each kind of
assembly fault turns up on hand-built and small-batch boards (a wrong value loaded
from the wrong reel or bag is the commonest; a reversed transistor the rarest of the
single-part faults). They are not taken from any defect statistics; a shop with its
own records should replace them, in code (``diagnose(..., prior_weights=...)``) or
in a small TOML file::

    [fault_weights]
    none = 10
    wrong-value = 4
    open = 2
    short = 2
    missing = 2
    reversed = 1

A file may give only some kinds; the others keep their defaults.

An open capacitor and a missing one are electrically the same (a capacitor is already
open at DC, and an open one passes no signal either), so diagnosis fits them as one
hypothesis, named ``missing``, whose prior weight is ``missing + open``.
"""

from __future__ import annotations

import typing

import math
import os
import tomllib
from collections.abc import Mapping
from types import MappingProxyType

from reconcile.errors import InputError
from reconcile.model.kinds import FaultKind
from reconcile.model.toml_lines import TomlLines, syntax_error_line

__all__ = ["DEFAULT_FAULT_WEIGHTS", "FAULT_KINDS", "fault_weights", "load_fault_weights"]

#: Every fault kind diagnosis knows, ``none`` first.
FAULT_KINDS: tuple[str, ...] = typing.get_args(FaultKind)

#: Invented default weights (common-practice guesses, see the module docstring).
DEFAULT_FAULT_WEIGHTS: Mapping[str, float] = MappingProxyType(
    {
        "none": 10.0,
        "wrong-value": 4.0,
        "open": 2.0,
        "short": 2.0,
        "missing": 2.0,
        "reversed": 1.0,
    }
)

_TABLE = "fault_weights"


def fault_weights(
    overrides: Mapping[str, float] | None = None,
    *,
    path: str | None = None,
    lines: TomlLines | None = None,
) -> dict[str, float]:
    """The defaults with ``overrides`` applied, every weight checked.

    Parameters
    ----------
    overrides
        Fault kind to weight (a positive finite number); kinds not given keep their
        default. ``None`` gives the defaults.
    path, lines
        Where the overrides came from, for error messages (used by
        :func:`load_fault_weights`).

    Returns
    -------
    dict of str to float
        One weight per kind in :data:`FAULT_KINDS`.

    Raises
    ------
    InputError
        An unknown kind, or a weight that is not a positive finite number.
    """
    out = dict(DEFAULT_FAULT_WEIGHTS)
    for kind, raw in (overrides or {}).items():
        line = lines.find((_TABLE, str(kind))) if lines is not None else None
        key = f"{_TABLE}.{kind}"
        if kind not in FAULT_KINDS:
            raise InputError(
                f"unknown fault kind {kind!r}; expected one of {', '.join(FAULT_KINDS)}",
                path=path, line=line, key=key,
            )
        if isinstance(raw, bool) or not isinstance(raw, int | float):
            raise InputError(
                f"weight must be a number, got {raw!r}", path=path, line=line, key=key
            )
        value = float(raw)
        if not (math.isfinite(value) and value > 0.0):
            raise InputError(
                f"weight must be a positive finite number, got {raw!r}",
                path=path, line=line, key=key,
            )
        out[kind] = value
    return out


def load_fault_weights(path: str | os.PathLike[str]) -> dict[str, float]:
    """Weights from the ``[fault_weights]`` table of a TOML file, over the defaults.

    Raises
    ------
    InputError
        The file cannot be read or parsed, has no ``[fault_weights]`` table, or holds a
        bad entry (see :func:`fault_weights`).
    """
    where = os.fspath(path)
    try:
        with open(where, encoding="utf-8") as handle:
            text = handle.read()
    except OSError as err:
        raise InputError(f"cannot read fault weights: {err.strerror}", path=where) from err
    try:
        data = tomllib.loads(text)
    except tomllib.TOMLDecodeError as err:
        raise InputError(f"not valid TOML: {err}", path=where, line=syntax_error_line(err)) from err
    table = data.get(_TABLE)
    if not isinstance(table, dict):
        raise InputError(f"no [{_TABLE}] table", path=where, key=_TABLE)
    return fault_weights(table, path=where, lines=TomlLines(text))
