"""Batched small-signal (AC) analysis at a DC operating point, at any frequencies.

The linear model is the exact Jacobian of the DC nodal equations at the operating point
(branch conductances plus every transistor's partial derivatives). At a frequency f each
capacitor adds the admittance j·2π·f·C; a transistor whose device gives ``ft`` and
``c_mu`` adds the hybrid-π capacitances, c_mu from base to collector and

    Cπ = gm / (2π·ft) − c_mu        (clipped at 0)

from base to emitter, gm being the exact dIC/dVBE at the operating point (the
transition-frequency relation 2π·ft = gm / (Cπ + Cμ) of the textbook hybrid-π model).
Without them a transistor has no capacitance (contract version 1). The AC probe of
``[bench] probe`` loads the signal's input and output nodes (where the two probes of a
gain reading sit) with its conductance and capacitance. Supplies are AC ground, so only
free nodes appear.

One complex solve per (sample, frequency) with two right-hand sides (1 A into the input,
1 A into the output) gives the open-circuit impedance matrix of the board seen as a
two-port between the input node and the output node, with no generator and no load:

    | v_in  |   | z_ii  z_io | | i_in  |
    | v_out | = | z_oi  z_oo | | i_out |

The test set-up is then closed around that two-port exactly:

* with the load R_L on the output and 1 A into the input (generator removed),
  v_out = z_oi·R_L/(R_L + z_oo) and v_in = z_ii − z_io·z_oi/(R_L + z_oo); v_in is the input
  impedance and v_out/v_in the gain (the ratio does not depend on what drives the input
  node, so the generator's resistance does not change it);
* with R_s on the input, no load, and 1 A into the output,
  v_out = z_oo − z_oi·z_io/(R_s + z_ii), the output impedance;
* the source gain is gain · Zin / (Zin + R_s).

Every (sample, frequency) pair is one row of one batched solve, in chunks that keep
the memory budget (:mod:`reconcile.engine.budget`); the solver is the engine's own
(:func:`reconcile.engine.kernel.solve_small`, with the fixed-pattern factorisation of
:mod:`reconcile.engine.sparse` for large batches).
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import ClassVar

import numpy as np

from reconcile.engine.budget import chunks, rows_per_chunk
from reconcile.engine.circuit import Circuit, Parameters
from reconcile.model import quantities
from reconcile.engine import kernel
from reconcile.engine.kernel import solve_small
from reconcile.engine.sparse import SPARSE_FROM_NODES, factorisation_for

SHORT_FACTOR = 1e9
"""A capacitor taken as a short in :meth:`LinearModel.resistance_seen` is a conductance
this many times the largest conductance at any node (relative error about 1e-9)."""


@dataclass(frozen=True)
class SmallSignal:
    """Small-signal results (NaN where undefined): one value per sample, or an array
    (samples, frequencies) from :meth:`LinearModel.response`."""

    frequency: np.ndarray
    gain: np.ndarray
    gain_phase_deg: np.ndarray
    source_gain: np.ndarray
    input_resistance: np.ndarray
    output_resistance: np.ndarray

    #: the small-signal quantities of the registry, each a field here
    QUANTITIES: ClassVar[tuple[str, ...]] = quantities.names(
        kind=quantities.QuantityKind.SMALL_SIGNAL
    )


def bytes_per_row(circuit: Circuit) -> int:
    """Peak working memory of one (sample, frequency) row of an AC solve, bytes: the
    complex matrix, its solver copy and the right-hand sides (an upper estimate)."""
    m = len(circuit.free)
    return int(3 * 16 * m * m + 6 * 16 * m + 64 * (len(circuit.capacitor_nodes)
                                                  + 2 * len(circuit.transistor_refs)) + 512)


def _stamp(y: np.ndarray, a: int, b: int, value: np.ndarray) -> None:
    """Add the two-terminal admittance ``value`` (rows,) between free rows a and b
    (-1: an AC-ground node)."""
    if a >= 0:
        y[:, a, a] += value
    if b >= 0:
        y[:, b, b] += value
    if a >= 0 and b >= 0:
        y[:, a, b] -= value
        y[:, b, a] -= value


@dataclass(frozen=True)
class LinearModel:
    """The board linearised at its operating point, for every sample of a batch.

    ``jac_ff`` is the free-node DC Jacobian (N, nF, nF) and ``gm`` the transistors'
    exact transconductances (N, nT), from :func:`reconcile.engine.solve_batch`.
    """

    circuit: Circuit
    params: Parameters
    jac_ff: np.ndarray
    gm: np.ndarray

    @property
    def has_signal(self) -> bool:
        return self.circuit.input_node is not None and self.circuit.output_node is not None

    def c_pi(self) -> np.ndarray:
        """(N, nT) base-emitter capacitance, F: gm/(2π·ft) − c_mu, at least 0."""
        with np.errstate(divide="ignore", invalid="ignore"):
            c = self.gm / (2.0 * np.pi * self.params.ft) - self.params.c_mu
        return np.where(np.isfinite(c) & (c > 0.0), c, 0.0)

    def take(self, index) -> LinearModel:
        """The model of a subset of samples."""
        return LinearModel(self.circuit, self.params.take(index), self.jac_ff[index],
                           self.gm[index])

    # ------------------------------------------------------------------ solves
    def admittance(self, s_idx: np.ndarray | slice, freq: np.ndarray) -> np.ndarray:
        """Complex nodal matrices (rows, nF, nF) of samples ``s_idx`` at ``freq``."""
        c, p = self.circuit, self.params
        pos = c.free_position
        rows, m = len(freq), len(c.free)
        y = np.empty((rows, m, m), dtype=complex)
        y.real = self.jac_ff[s_idx]
        y.imag = 0.0
        omega = 2.0 * np.pi * freq
        yi = y.imag
        for k, (a, b) in enumerate(c.capacitor_nodes.tolist()):
            _stamp(yi, pos[a], pos[b], omega * p.capacitor_farads[s_idx, k])
        if len(c.transistor_refs):
            c_pi = self.c_pi()[s_idx]
            c_mu = p.c_mu[s_idx]
            for t, (nc, nb, ne) in enumerate(c.transistor_nodes.tolist()):
                if (c_mu[:, t] > 0.0).any():
                    _stamp(yi, pos[nb], pos[nc], omega * c_mu[:, t])
                if (c_pi[:, t] > 0.0).any():
                    _stamp(yi, pos[nb], pos[ne], omega * c_pi[:, t])
        g_probe, c_probe = p.probe_ac_siemens[s_idx], p.probe_ac_farads[s_idx]
        if (g_probe > 0.0).any() or (c_probe > 0.0).any():
            for node in {c.input_node, c.output_node}:
                r = pos[node]
                if r >= 0:
                    y[:, r, r] += g_probe + 1j * omega * c_probe
        return y

    def response(self, frequency: np.ndarray | float) -> SmallSignal:
        """Every small-signal quantity at ``frequency``: (F,) Hz for every sample, or
        (N, F) one row of frequencies per sample. Arrays are (N, F)."""
        if not self.has_signal:
            raise KeyError("the board has no [signal] set-up")
        n = self.params.n_samples
        freq = np.asarray(frequency, dtype=float)
        freq = np.broadcast_to(freq if freq.ndim == 2 else freq.reshape(1, -1),
                               (n, freq.shape[-1] if freq.ndim else 1))
        n_f = freq.shape[1]
        flat_f = freq.ravel()
        total = n * n_f
        out = {name: np.empty(total) for name in SmallSignal.QUANTITIES + ("gain_phase_deg",)}
        step = rows_per_chunk(bytes_per_row(self.circuit), share=0.5)
        for sl in chunks(total, step):
            idx = np.arange(sl.start, sl.stop)
            # one frequency per sample: the samples of the chunk are a slice (no gathers)
            block = self._close_two_port(sl if n_f == 1 else idx // n_f, flat_f[idx])
            for name, values in block.items():
                out[name][sl] = values
        return SmallSignal(frequency=freq.copy(),
                           **{k: v.reshape(n, n_f) for k, v in out.items()})

    def _two_port(self, s_idx: np.ndarray, freq: np.ndarray) -> np.ndarray:
        """(rows, 4) open-circuit impedances z_ii, z_oi, z_io, z_oo of samples ``s_idx``
        at ``freq``: the compiled kernel's per-board solves when it is in use (a board
        under :data:`SPARSE_FROM_NODES` free nodes), else one batched solve."""
        c = self.circuit
        pos = c.free_position
        rows, m = len(freq), len(c.free)
        i_in, i_out = pos[c.input_node], pos[c.output_node]
        if self._compiled(rows):
            board_of = np.arange(self.params.n_samples)[s_idx]
            return kernel.two_port(c, self.params, self.jac_ff, self.c_pi(), board_of, freq)
        y = self.admittance(s_idx, freq)
        rhs = np.zeros((rows, m, 2), dtype=complex)
        rhs[:, i_in, 0] = 1.0
        rhs[:, i_out, 1] = 1.0
        z = solve_small(y, rhs, factorisation_for(c, capacitors=True, n_samples=rows))
        return np.stack([z[:, i_in, 0], z[:, i_out, 0], z[:, i_in, 1], z[:, i_out, 1]], axis=1)

    def _compiled(self, rows: int) -> bool:
        """Whether an AC solve of ``rows`` rows runs on the compiled kernel: a board under
        :data:`SPARSE_FROM_NODES` free nodes whose signal nodes are free, when in use."""
        c = self.circuit
        pos = c.free_position
        return (len(c.free) < SPARSE_FROM_NODES
                and min(pos[c.input_node], pos[c.output_node]) >= 0
                and kernel.use_compiled(rows))

    def _close_two_port(self, s_idx: np.ndarray, freq: np.ndarray) -> dict[str, np.ndarray]:
        p = self.params
        z = self._two_port(s_idx, freq)
        rl = p.load_ohms[s_idx]
        rs = p.source_ohms[s_idx]
        if self._compiled(len(freq)):
            return kernel.close_two_port(z, rl, rs)
        z_ii, z_oi, z_io, z_oo = z.T
        no_load = ~np.isfinite(rl)
        with np.errstate(divide="ignore", invalid="ignore"):
            rl_f = np.where(no_load, 1.0, rl)
            v_out = np.where(no_load, z_oi, z_oi * rl_f / (rl_f + z_oo))
            v_in = np.where(no_load, z_ii, z_ii - z_io * z_oi / (rl_f + z_oo))
            gain_c = v_out / v_in
            z_out = z_oo - z_oi * z_io / (rs + z_ii)
            source_gain = np.abs(gain_c * v_in / (v_in + rs))
        return {
            "gain": np.abs(gain_c),
            "gain_phase_deg": np.degrees(np.angle(gain_c)),
            "source_gain": source_gain,
            "input_resistance": np.abs(v_in),
            "output_resistance": np.abs(z_out),
        }

    def at_signal_frequency(self) -> SmallSignal:
        """Each sample at its own ``params.frequency``: arrays (N,)."""
        r = self.response(self.params.frequency[:, None])
        return SmallSignal(**{k: getattr(r, k)[:, 0] for k in
                              ("frequency", "gain_phase_deg") + SmallSignal.QUANTITIES})

    def resistance_seen(self, capacitor: int) -> np.ndarray:
        """(N,) ohms: the resistance capacitor ``capacitor`` sees with every other
        capacitor of the board shorted, the device capacitances open, the input node
        driven (AC ground: the gain is v_out/v_in) and the load in place — the
        short-circuit time-constant method's R for that capacitor."""
        c, p = self.circuit, self.params
        pos = c.free_position
        n, m = p.n_samples, len(c.free)
        y = self.jac_ff.copy()
        rl = p.load_ohms
        r_out = pos[c.output_node]
        if r_out >= 0:
            y[:, r_out, r_out] += np.where(np.isfinite(rl), 1.0 / rl, 0.0) + p.probe_ac_siemens
        g_short = SHORT_FACTOR * np.max(np.abs(np.diagonal(self.jac_ff, axis1=1, axis2=2)),
                                        axis=1, initial=1e-3)
        r_in = pos[c.input_node]
        if r_in >= 0:
            y[:, r_in, r_in] += g_short
        for k, (a, b) in enumerate(c.capacitor_nodes.tolist()):
            if k != capacitor:
                _stamp(y, pos[a], pos[b], g_short)
        a, b = (pos[i] for i in c.capacitor_nodes[capacitor])
        rhs = np.zeros((n, m, 1))
        if a >= 0:
            rhs[:, a, 0] += 1.0
        if b >= 0:
            rhs[:, b, 0] -= 1.0
        v = solve_small(y, rhs)[:, :, 0]
        va = v[:, a] if a >= 0 else 0.0
        vb = v[:, b] if b >= 0 else 0.0
        return np.asarray(va - vb, dtype=float)
