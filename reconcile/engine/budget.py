"""The memory budget every batched call works within, and the chunks that keep it.

A batched call (the engine, a Monte Carlo, a batch of hypothesis fits) states how many
bytes one row of its work needs; :func:`rows_per_chunk` turns the budget into a chunk
size and :func:`chunks` walks the rows in slices of that size. The budget is process-wide,
read once from ``RECONCILE_MEMORY`` on first use; the command line's ``--memory SIZE``
(before the command) overrides it; library users can set it with :func:`set_budget` or
for a block with :func:`budget`.

The default, 512 MiB, leaves room on a small machine for the interpreter and the
libraries (about 150–250 MiB) beside one batch. The environment variable
``RECONCILE_MEMORY`` (``256M``, ``1G``, ``300MiB``: binary units) sets it for a process.
"""

from __future__ import annotations

import contextlib
import os
import re
from collections.abc import Iterator

from reconcile.errors import InputError

MIB = 1024 * 1024
DEFAULT_BUDGET_BYTES = 512 * MIB
"""Default working-memory budget for one batched call, bytes."""
MIN_BUDGET_BYTES = 16 * MIB
"""Smallest budget accepted: below this the fixed overheads dominate."""
THROUGHPUT_ROWS = 8192
"""Rows per engine call that run fastest, whatever the budget allows. The engine's Newton
loop and its fixed-pattern factorisation are long chains of element-wise numpy
operations over the sample axis; at about 8 000 samples each operand (64 kB) stays in
the core's cache, and the Python cost per call is already spread thin. Measured side by
side on the sample preamp (``tests/benchmarks/bench_engine.py``, ``chunk_rows``): 8 192
rows per call run 1.3–1.7× faster than the 71 544 the default budget would allow, and
1 024 rows lose again to per-call overhead."""

ENVIRONMENT = "RECONCILE_MEMORY"
_UNITS = {"": 1, "K": 1024, "M": MIB, "G": 1024 * MIB}
_budget: dict[str, int] = {}


def parse_budget(text: str, *, key: str = ENVIRONMENT) -> int:
    """``256M``, ``1G``, ``300MiB``, ``2 GB`` (binary units; a bare number is bytes)."""
    m = re.fullmatch(r"\s*([0-9]+(?:\.[0-9]+)?)\s*([KMG]?)(?:i?B)?\s*", str(text), re.I)
    if not m:
        raise InputError(f"{text!r} is not a memory size: write e.g. 256M or 1G", key=key)
    return _at_least_minimum(int(float(m.group(1)) * _UNITS[m.group(2).upper()]), key)


def _at_least_minimum(nbytes: int, key: str) -> int:
    if nbytes < MIN_BUDGET_BYTES:
        raise InputError(f"a memory budget of {nbytes / MIB:.3g} MiB is too small: give at "
                         f"least {MIN_BUDGET_BYTES // MIB} MiB", key=key)
    if nbytes > MAX_BUDGET_BYTES:
        raise InputError(f"a memory budget of {nbytes / MIB / 1024:.3g} GiB is more than any "
                         f"machine here has: give at most {MAX_BUDGET_BYTES // MIB // 1024} GiB",
                         key=key)
    return nbytes


def budget_bytes() -> int:
    """The budget now in force, bytes (first use: ``RECONCILE_MEMORY`` or the default)."""
    if "bytes" not in _budget:
        text = os.environ.get(ENVIRONMENT, "").strip()
        _budget["bytes"] = parse_budget(text) if text else DEFAULT_BUDGET_BYTES
    return _budget["bytes"]


MAX_BUDGET_BYTES = 1024 * 1024 * MIB
"""Largest budget accepted (1 TiB): beyond any machine this tool runs on, so a larger
figure is a typing slip."""


def forget_budget() -> None:
    """Drop a budget set in this process: the next use reads ``RECONCILE_MEMORY`` or the
    default again (each command line starts so)."""
    _budget.pop("bytes", None)


def set_budget(nbytes: int) -> None:
    """Set the process-wide budget (bytes); refuses values under :data:`MIN_BUDGET_BYTES`."""
    _budget["bytes"] = _at_least_minimum(int(nbytes), "--memory")


@contextlib.contextmanager
def budget(nbytes: int) -> Iterator[None]:
    """Use ``nbytes`` as the budget inside a ``with`` block."""
    old = budget_bytes()
    set_budget(nbytes)
    try:
        yield
    finally:
        _budget["bytes"] = old


def rows_per_chunk(
    bytes_per_row: float,
    *,
    share: float = 1.0,
    at_least: int = 1,
    at_most: int | None = None,
) -> int:
    """How many rows of ``bytes_per_row`` fit in ``share`` of the budget (at least
    ``at_least``, and at most ``at_most`` when given, e.g. :data:`THROUGHPUT_ROWS`).

    ``bytes_per_row`` is the peak working memory of one row (sample, board, hypothesis),
    temporaries included; a caller that holds results across chunks passes a ``share``
    under 1 to leave room for them.
    """
    if not bytes_per_row > 0:
        rows = max(at_least, 1)
    else:
        rows = max(int(budget_bytes() * share // bytes_per_row), at_least, 1)
    if at_most is not None:
        rows = min(rows, max(int(at_most), 1))
    return rows


def chunks(n_rows: int, rows: int) -> Iterator[slice]:
    """Slices ``[0, rows)``, ``[rows, 2*rows)`` … covering ``n_rows`` rows."""
    rows = max(int(rows), 1)
    for start in range(0, n_rows, rows):
        yield slice(start, min(start + rows, n_rows))
