"""What an ohmmeter reads between two nodes of a board in circuit, with the power off.

A check "measure across C2 in circuit" is only right if it says what a good board reads
there, which is the network around the part, not the part alone. With the power off
and the supply disconnected from the board (its node left floating), the meter sees:

- every resistor;
- no capacitor: a good one charges from the meter's test current and then reads open;
- no transistor: a low-power ohms range keeps its test voltage below a junction's
  turn-on, so the transistors do not conduct (common practice when measuring in
  circuit; a diode-test or high-power range would forward-bias them).

The reading is the effective resistance between the two nodes of that resistor network:
ground one node, drive 1 A into the other, and read its voltage (nodal analysis with the
network's conductance matrix). Nodes the network does not join read open (``inf``).
"""

from __future__ import annotations

import math

import numpy as np

from reconcile.data.readings import Reading, default_uncertainty
from reconcile.model.board import Board

__all__ = ["ohms_between", "readings_differ"]

SEPARATION_SIGMAS = 3.0
"""Two expected readings tell a fault apart only if they differ by more than this many
of their combined default standard uncertainties (the registry's meter defaults)."""


def ohms_between(board: Board, a: str, b: str) -> float:
    """The resistance an ohmmeter reads from node ``a`` to node ``b`` in circuit, power
    off (see the module docstring)."""
    if a == b:
        return 0.0
    edges = [(r.nodes[0], r.nodes[1], 1.0 / r.ohms) for r in board.resistors.values()
             if r.nodes[0] != r.nodes[1]]
    component = _component(edges, a)
    if b not in component:
        return math.inf
    nodes = sorted(component - {b})
    index = {n: i for i, n in enumerate(nodes)}
    g = np.zeros((len(nodes), len(nodes)))
    for n1, n2, siemens in edges:
        if n1 not in component:  # then n2 is not either: the edge joins them
            continue
        i, j = index.get(n1), index.get(n2)  # None for b, the grounded node
        if i is not None:
            g[i, i] += siemens
        if j is not None:
            g[j, j] += siemens
        if i is not None and j is not None:
            g[i, j] -= siemens
            g[j, i] -= siemens
    drive = np.zeros(len(nodes))
    drive[index[a]] = 1.0
    return float(np.linalg.solve(g, drive)[index[a]])


def _component(edges: list[tuple[str, str, float]], start: str) -> set[str]:
    """The nodes the resistors join to ``start``."""
    seen, todo = {start}, [start]
    while todo:
        node = todo.pop()
        for n1, n2, _ in edges:
            other = n2 if n1 == node else n1 if n2 == node else None
            if other is not None and other not in seen:
                seen.add(other)
                todo.append(other)
    return seen


def readings_differ(quantity: str, first: float, second: float) -> bool:
    """Whether a meter tells ``first`` from ``second`` (both expected readings of
    ``quantity``, SI units): they differ by more than :data:`SEPARATION_SIGMAS` of their
    combined default uncertainties. An open circuit (``inf``) differs from any finite
    reading."""
    if math.isinf(first) or math.isinf(second):
        return first != second
    u = math.hypot(_default_u(quantity, first), _default_u(quantity, second))
    return abs(first - second) > SEPARATION_SIGMAS * u


def _default_u(quantity: str, value: float) -> float:
    return default_uncertainty(Reading.from_si(quantity, "", value))
