"""Batched small-signal analysis at a DC operating point.

The linear model is the exact Jacobian of the DC nodal equations at the operating point
(branch conductances plus every transistor's partial derivatives), with each capacitor
as the admittance j·2π·f·C. Supplies are AC ground, so only free nodes appear.

One complex solve per sample with two right-hand sides (1 A into the input, 1 A into the
output) gives the open-circuit impedance matrix of the board seen as a two-port between
the input node and the output node, with no generator and no load attached:

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
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import ClassVar

import numpy as np

from reconcile.engine.circuit import Circuit, Parameters
from reconcile.model import quantities
from reconcile.engine.kernel import solve_small
from reconcile.engine.sparse import factorisation_for


@dataclass(frozen=True)
class SmallSignal:
    """Small-signal results, one value per sample (NaN where undefined)."""

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


def analyse(circuit: Circuit, params: Parameters, jac_ff: np.ndarray) -> SmallSignal | None:
    """Small-signal block from the free-node DC Jacobian (N, nF, nF); None without [signal]."""
    if circuit.input_node is None or circuit.output_node is None:
        return None
    n = params.n_samples
    pos = circuit.free_position
    m = jac_ff.shape[1]
    y = np.empty((n, m, m), dtype=complex)
    y.real = jac_ff
    y.imag = 0.0
    omega = 2.0 * np.pi * params.frequency
    cap = circuit.capacitor_nodes
    for k in range(cap.shape[0]):
        a, b = pos[cap[k, 0]], pos[cap[k, 1]]
        yc = omega * params.capacitor_farads[:, k]
        if a >= 0:
            y.imag[:, a, a] += yc
        if b >= 0:
            y.imag[:, b, b] += yc
        if a >= 0 and b >= 0:
            y.imag[:, a, b] -= yc
            y.imag[:, b, a] -= yc
    i_in, i_out = pos[circuit.input_node], pos[circuit.output_node]
    rhs = np.zeros((n, m, 2), dtype=complex)
    rhs[:, i_in, 0] = 1.0
    rhs[:, i_out, 1] = 1.0
    z = solve_small(y, rhs, factorisation_for(circuit, capacitors=True, n_samples=n))
    z_ii, z_oi = z[:, i_in, 0], z[:, i_out, 0]
    z_io, z_oo = z[:, i_in, 1], z[:, i_out, 1]
    rl = params.load_ohms
    rs = params.source_ohms
    no_load = ~np.isfinite(rl)
    with np.errstate(divide="ignore", invalid="ignore"):
        rl_f = np.where(no_load, 1.0, rl)
        v_out = np.where(no_load, z_oi, z_oi * rl_f / (rl_f + z_oo))
        v_in = np.where(no_load, z_ii, z_ii - z_io * z_oi / (rl_f + z_oo))
        gain_c = v_out / v_in
        z_out = z_oo - z_oi * z_io / (rs + z_ii)
        source_gain = np.abs(gain_c * v_in / (v_in + rs))
    return SmallSignal(
        frequency=params.frequency.copy(),
        gain=np.abs(gain_c),
        gain_phase_deg=np.degrees(np.angle(gain_c)),
        source_gain=source_gain,
        input_resistance=np.abs(v_in),
        output_resistance=np.abs(z_out),
    )
