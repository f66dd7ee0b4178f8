"""lmfit names for the fit's parameter keys, and back.

lmfit wants every parameter name to be a Python identifier that is not a reserved word
(its expressions are evaluated by asteval). Our keys are not always that: ``Q1.IS``,
``temperature``, an instrument's calibration key ``DMM-A:voltage:20V``. Each key becomes
an identifier made of its letters, digits and underscores (anything else becomes ``_``,
a leading digit or a reserved word gets a ``p_`` prefix) and, where two keys would meet
on one name, a ``_2``, ``_3``, ... suffix. Stdlib only.
"""

from __future__ import annotations

import keyword
import re
from types import MappingProxyType

__all__ = ["ParameterNames", "safe_names"]

_NOT_NAME = re.compile(r"[^0-9A-Za-z_]")
# names asteval keeps for itself beside Python's keywords (lmfit refuses them too)
_RESERVED = frozenset({"eval", "exec", "execfile", "print", "__import__", "__fstring__",
                       "__package__"})


class ParameterNames:
    """The two-way mapping between parameter keys and lmfit names, in the keys' order."""

    def __init__(self, keys: tuple[str, ...] | list[str]) -> None:
        names = safe_names(keys)
        self.keys: tuple[str, ...] = tuple(keys)
        self.names: tuple[str, ...] = tuple(names)
        self.name_of = MappingProxyType(dict(zip(self.keys, self.names)))
        self.key_of = MappingProxyType(dict(zip(self.names, self.keys)))

    def __repr__(self) -> str:
        return f"ParameterNames({dict(self.name_of)!r})"


def _one(key: str) -> str:
    name = _NOT_NAME.sub("_", key) or "p"
    if name[0].isdigit() or keyword.iskeyword(name) or name in _RESERVED:
        name = "p_" + name
    return name


def safe_names(keys) -> list[str]:
    """One identifier per key, unique, in the keys' order."""
    taken: set[str] = set()
    out = []
    for key in keys:
        base = _one(key)
        name, n = base, 1
        while name in taken:
            n += 1
            name = f"{base}_{n}"
        taken.add(name)
        out.append(name)
    return out
