"""A board compiled into index arrays, and the batch of parameter values it runs with.

:class:`Circuit` is the topology: which node each part touches, as integer indices into
the node list (gnd is the extra index ``n_nodes``). :class:`Parameters` holds every value
the engine needs, each with a leading sample axis of length N, so that one call solves
N variants of the same board (Monte Carlo, fit Jacobians, lots, fault hypotheses).

Conductance branches, in this order: the resistors, one DC leak per capacitor (zero unless
a fault shorts it) and the probes (a voltmeter attached across two nodes while a reading
is taken). Supplies fix the voltage of their node; every other node is free.
"""

from __future__ import annotations

from dataclasses import dataclass, field, fields
from functools import cached_property

import numpy as np

from reconcile.model.board import GND, Board


@dataclass(frozen=True)
class Circuit:
    """The topology of a board, ready for the engine."""

    board: Board
    node_names: tuple[str, ...]
    resistor_refs: tuple[str, ...]
    capacitor_refs: tuple[str, ...]
    supply_refs: tuple[str, ...]
    transistor_refs: tuple[str, ...]
    resistor_nodes: np.ndarray  # (nR, 2)
    capacitor_nodes: np.ndarray  # (nC, 2)
    probe_nodes: np.ndarray  # (nP, 2)
    supply_nodes: np.ndarray  # (nS,)
    transistor_nodes: np.ndarray  # (nT, 3): c, b, e
    polarity: np.ndarray  # (nT,) +1 npn, -1 pnp
    free: np.ndarray  # (nF,) indices of free nodes
    input_node: int | None
    output_node: int | None
    dc_floating: np.ndarray = field(default_factory=lambda: np.zeros(0, dtype=np.intp))

    # dc_floating: nodes with no DC path to gnd or a supply (reached only through
    # capacitors, as a signal input or output may be). They have no DC voltage; the DC
    # solve ties each to gnd through FLOAT_SIEMENS so its equations stay regular.

    @property
    def n_nodes(self) -> int:
        return len(self.node_names)

    @property
    def gnd(self) -> int:
        return len(self.node_names)

    def node_index(self, name: str) -> int:
        if name == GND or name == "0":
            return self.gnd
        return self.node_names.index(name)

    @cached_property
    def branch_nodes(self) -> np.ndarray:
        """(nB, 2) nodes of every conductance branch: resistors, capacitor leaks, probes
        (worked out once per circuit, read-only: the topology never changes)."""
        out = np.concatenate(
            [self.resistor_nodes, self.capacitor_nodes, self.probe_nodes], axis=0
        ).astype(np.intp)
        out.setflags(write=False)
        return out

    @cached_property
    def free_position(self) -> np.ndarray:
        """For each node (and gnd), its row in the free-node system, or -1 (once per
        circuit, read-only)."""
        pos = np.full(self.n_nodes + 1, -1, dtype=np.intp)
        pos[self.free] = np.arange(len(self.free))
        pos.setflags(write=False)
        return pos


FLOAT_SIEMENS = 1e-12


def _dc_floating(n_nodes: int, edges: list[tuple[int, int]], gnd: int) -> np.ndarray:
    """Nodes not joined to gnd by any DC path (union-find over DC edges)."""
    parent = list(range(n_nodes + 1))

    def find(i: int) -> int:
        while parent[i] != i:
            parent[i] = parent[parent[i]]
            i = parent[i]
        return i

    for a, b in edges:
        ra, rb = find(a), find(b)
        if ra != rb:
            parent[ra] = rb
    root = find(gnd)
    return np.array([i for i in range(n_nodes) if find(i) != root], dtype=np.intp)


def compile_board(board: Board, probes: tuple[tuple[str, str], ...] = ()) -> Circuit:
    """Compile a board (plus optional voltmeter probes, as node pairs) into a Circuit."""
    names = tuple(board.nodes)
    for a, b in probes:
        for n in (a, b):
            if n not in names and n not in (GND, "0"):
                raise KeyError(f"probe on unknown node {n!r}")
    index = {name: i for i, name in enumerate(names)}
    gnd = len(names)
    index[GND] = gnd
    index["0"] = gnd

    def pair(nodes: tuple[str, str]) -> list[int]:
        return [index[nodes[0]], index[nodes[1]]]

    res_nodes = np.array([pair(r.nodes) for r in board.resistors.values()], dtype=np.intp).reshape(
        -1, 2
    )
    cap_nodes = np.array([pair(c.nodes) for c in board.capacitors.values()], dtype=np.intp).reshape(
        -1, 2
    )
    probe_nodes = np.array([pair(p) for p in probes], dtype=np.intp).reshape(-1, 2)
    sup_nodes = np.array([index[s.node] for s in board.supplies.values()], dtype=np.intp)
    q_nodes = np.array(
        [[index[q.c], index[q.b], index[q.e]] for q in board.transistors.values()], dtype=np.intp
    ).reshape(-1, 3)
    polarity = np.array(
        [1.0 if q.polarity == "npn" else -1.0 for q in board.transistors.values()], dtype=float
    )
    fixed = set(sup_nodes.tolist())
    free = np.array([i for i in range(len(names)) if i not in fixed], dtype=np.intp)
    sig = board.signal
    edges = [tuple(e) for e in res_nodes.tolist()] + [(int(n), gnd) for n in sup_nodes]
    for c, b, e in q_nodes.tolist():
        edges += [(c, b), (b, e)]
    floating = _dc_floating(len(names), edges, gnd)
    return Circuit(
        board=board,
        node_names=names,
        resistor_refs=tuple(board.resistors),
        capacitor_refs=tuple(board.capacitors),
        supply_refs=tuple(board.supplies),
        transistor_refs=tuple(board.transistors),
        resistor_nodes=res_nodes,
        capacitor_nodes=cap_nodes,
        probe_nodes=probe_nodes,
        supply_nodes=sup_nodes,
        transistor_nodes=q_nodes,
        polarity=polarity,
        free=free,
        input_node=index[sig.input] if sig.input else None,
        output_node=index[sig.output] if sig.output else None,
        dc_floating=floating,
    )


@dataclass(frozen=True)
class Parameters:
    """Every value the engine uses, each with a leading sample axis of length N.

    Units: ohms, farads, siemens, volts, amperes, kelvin, hertz. Device values are at
    25 C; the engine scales IS and VT to ``temperature``.
    """

    resistor_ohms: np.ndarray  # (N, nR)
    capacitor_farads: np.ndarray  # (N, nC)
    capacitor_leak_siemens: np.ndarray  # (N, nC) DC conductance across a capacitor (faults)
    probe_siemens: np.ndarray  # (N, nP)
    supply_volts: np.ndarray  # (N, nS)
    IS: np.ndarray  # (N, nT) A at 25 C
    beta: np.ndarray  # (N, nT)
    beta_r: np.ndarray  # (N, nT)
    VA: np.ndarray  # (N, nT) V
    n: np.ndarray  # (N, nT)
    xti: np.ndarray  # (N, nT)
    bandgap: np.ndarray  # (N, nT) eV
    ft: np.ndarray  # (N, nT) Hz, transition frequency (inf: no device capacitance)
    c_mu: np.ndarray  # (N, nT) F, base-collector capacitance
    temperature: np.ndarray  # (N,) K, junction temperature
    source_ohms: np.ndarray  # (N,)
    load_ohms: np.ndarray  # (N,)
    frequency: np.ndarray  # (N,) Hz
    probe_ac_siemens: np.ndarray  # (N,) the AC probe's conductance on the signal nodes
    probe_ac_farads: np.ndarray  # (N,) and its capacitance
    extra: dict = field(default_factory=dict, compare=False)

    @property
    def n_samples(self) -> int:
        return int(self.temperature.shape[0])

    def _with_arrays(self, arrays: dict) -> Parameters:
        """A copy with the given fields replaced (the constructor straight from the
        field names, :data:`_PARAMETER_ARRAYS`, as :func:`dataclasses.replace` would
        do after looking them up again on every call)."""
        return Parameters(**arrays, extra=self.extra)

    def take(self, index: np.ndarray | slice) -> Parameters:
        """The parameters of a subset of samples (every sample in order, a slice of the
        whole axis: this same object, whose arrays such a slice would only view)."""
        if isinstance(index, slice) and index.indices(self.n_samples) == (
                0, self.n_samples, 1):
            return self
        return self._with_arrays({name: getattr(self, name)[index] for name in _PARAMETER_ARRAYS})

    def repeat(self, n: int) -> Parameters:
        """Each sample repeated ``n`` times, consecutively (sample i -> rows i*n..i*n+n-1)."""
        return self._with_arrays({name: getattr(self, name).repeat(n, axis=0)
                                  for name in _PARAMETER_ARRAYS})

    def with_arrays(self, **arrays: np.ndarray) -> Parameters:
        """A copy with some fields replaced by the given arrays as they are (each of its
        field's shape; no copy, no broadcast: the caller's own new arrays)."""
        out = {name: getattr(self, name) for name in _PARAMETER_ARRAYS}
        out.update(arrays)
        return self._with_arrays(out)

    def with_values(self, **arrays: np.ndarray) -> Parameters:
        """A copy with some fields replaced (broadcast to the sample axis)."""
        out = {name: getattr(self, name) for name in _PARAMETER_ARRAYS}
        for name, value in arrays.items():
            current = out[name]
            out[name] = np.broadcast_to(np.asarray(value, dtype=float), current.shape).copy()
        return self._with_arrays(out)

    @staticmethod
    def concatenate(items: list[Parameters]) -> Parameters:
        return items[0]._with_arrays({
            name: np.concatenate([getattr(p, name) for p in items], axis=0)
            for name in _PARAMETER_ARRAYS})


_PARAMETER_ARRAYS = tuple(f.name for f in fields(Parameters) if f.name != "extra")
"""The array fields of :class:`Parameters` (every field but ``extra``), in order."""


def nominal_parameters(
    circuit: Circuit,
    n: int = 1,
    *,
    temperature: float | None = None,
    probe_ohms: float | None = None,
) -> Parameters:
    """The board's drawn values repeated over ``n`` samples.

    Probes are off (zero conductance) unless ``probe_ohms`` is given, in which case every
    probe of the circuit is attached with that resistance.
    """
    board = circuit.board

    def rows(values: list[float], width: int) -> np.ndarray:
        arr = np.asarray(values, dtype=float).reshape(1, width)
        return np.repeat(arr, n, axis=0)

    nR, nC, nS, nT = (
        len(circuit.resistor_refs),
        len(circuit.capacitor_refs),
        len(circuit.supply_refs),
        len(circuit.transistor_refs),
    )
    devs = [board.device_of(ref) for ref in circuit.transistor_refs]
    n_probe = len(circuit.probe_nodes)
    probe_g = 0.0 if probe_ohms is None else 1.0 / probe_ohms
    sig = board.signal
    t = board.temperature if temperature is None else temperature
    return Parameters(
        resistor_ohms=rows([r.ohms for r in board.resistors.values()], nR),
        capacitor_farads=rows([c.farads for c in board.capacitors.values()], nC),
        capacitor_leak_siemens=rows([c.leak_siemens for c in board.capacitors.values()], nC),
        probe_siemens=np.full((n, n_probe), probe_g),
        supply_volts=rows([s.volts for s in board.supplies.values()], nS),
        IS=rows([d.IS.value for d in devs], nT),
        beta=rows([d.beta.value for d in devs], nT),
        beta_r=rows([d.beta_r.value for d in devs], nT),
        VA=rows([d.VA.value for d in devs], nT),
        n=rows([d.n.value for d in devs], nT),
        xti=rows([d.is_temp_exponent for d in devs], nT),
        bandgap=rows([d.bandgap for d in devs], nT),
        ft=rows([d.ft.value for d in devs], nT),
        c_mu=rows([d.c_mu.value for d in devs], nT),
        temperature=np.full(n, float(t)),
        source_ohms=np.full(n, float(sig.source_ohms)),
        load_ohms=np.full(n, float(sig.load_ohms)),
        frequency=np.full(n, float(sig.frequency)),
        probe_ac_siemens=np.full(n, 1.0 / board.bench.probe_ohms),
        probe_ac_farads=np.full(n, float(board.bench.probe_farads)),
    )
