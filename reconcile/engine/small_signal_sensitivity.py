"""Analytic small-signal sensitivities: d(gain, source gain, input and output resistance)/dp.

At a frequency the board is the complex nodal matrix Y = J + jω·C of
:class:`~reconcile.engine.small_signal.LinearModel`, and every small-signal quantity is a
closed-form function of four entries of Y⁻¹, the two-port's open-circuit impedances
z_ab = e_aᵀ·Y⁻¹·e_b (a, b the input and the output node). Their derivatives are

    dz_ab/dp = −u_aᵀ · (dY/dp) · x_b,       Y·x_b = e_b,   Yᵀ·u_a = e_a,

so two solves and two transposed solves per (sample, frequency) give every column,
whatever the number of parameters. dY/dp has three parts:

* a branch's own value: −1/R² between a resistor's nodes, 1 for a capacitor's leak,
  jω between a capacitor's nodes for its capacitance;
* a transistor's own parameters at fixed junction voltages: the slopes of its four
  conductances (:func:`reconcile.engine.devices.conductance_slopes`) by IS(T), beta,
  1/VA and n·VT, and through those by IS at 25 C, n and the temperature
  (:func:`reconcile.engine.sensitivity.device_terms`);
* the operating point moving: the conductances' slopes by VBE and VBC times the DC
  sensitivities dV/dp of the transistor's nodes (:mod:`reconcile.engine.sensitivity`,
  the implicit function theorem), which the caller passes in.

A transistor's conductances enter Y as in the engine's Newton matrix, so for its nodes
(c, b, e) uᵀ·dY·x = (u_c − u_e)·(dg₀·x_be + dg₁·x_bc) + (u_b − u_e)·(dg₂·x_be + dg₃·x_bc),
(dg₀..dg₃) being the changes of (dIC/dVBE, dIC/dVBC, dIB/dVBE, dIB/dVBC) and x_be =
x_b − x_e. The base-emitter capacitance Cπ = gm/(2π·ft) − c_mu moves with gm = dg₀ + dg₁
where it is not clipped at 0; c_mu, ft, the probe, the source and the load are not
columns.

The quantities close the two-port exactly as :class:`LinearModel` does; their derivatives
follow by the chain rule on the complex values, and d|w| = Re(w̄·dw)/|w|.

Columns are in the caller's coordinates: ``node_dv`` is dV/dx_c (N, n_nodes + 1, C) for
each column c and ``scale`` (N, C) is d(external value)/dx_c of the column's own
parameter (ones for engine units). Rows are worked in chunks under the memory budget.
"""

from __future__ import annotations

import numpy as np

from reconcile.engine import devices
from reconcile.engine.budget import chunks, rows_per_chunk
from reconcile.engine.kernel import solve_small
from reconcile.engine.sparse import factorisation_for
from reconcile.engine.sensitivity import device_terms, junction_voltages
from reconcile.engine.small_signal import LinearModel

#: (a, b) of z_ab in the order z_ii, z_oi, z_io, z_oo: a picks u (0 input, 1 output),
#: b picks x
_PAIRS_A = np.array([0, 1, 0, 1])
_PAIRS_B = np.array([0, 0, 1, 1])
_DEVICE_FIELDS = ("IS", "beta", "VA", "n")


DIFFERENTIATED = ("gain", "source_gain", "input_resistance", "output_resistance")
"""The small-signal quantities given here with their derivatives: the magnitudes the
two-port closes to (the registry's other small-signal entry, the gain's phase, is shown
but never a reading, so nothing needs its derivative)."""


def _bytes_per_row(linear: LinearModel, n_cols: int) -> int:
    c = linear.circuit
    m, size = len(c.free), c.n_nodes + 1
    return int(3 * 16 * m * m + 8 * 16 * size + 16 * 4 * n_cols * 3 + 8 * 4 * n_cols
               + 8 * size * n_cols + 1024)


def small_signal_sensitivity(linear: LinearModel, v: np.ndarray, frequency: np.ndarray,
                             cols, node_dv: np.ndarray, scale: np.ndarray | None = None
                             ) -> dict[str, np.ndarray]:
    """d(quantity)/dx (N, F, C) for each of :data:`DIFFERENTIATED`.

    ``linear``: the boards' linear model (N samples) at their solved node voltages ``v``
    (N, n_nodes + 1); ``frequency`` (N, F) Hz, one row per sample; ``cols`` the
    ``(field, column)`` of each column's own parameter (an engine
    :class:`~reconcile.engine.Parameters` field, or None for a column no board value
    depends on directly); ``node_dv`` and ``scale`` as in the module's docstring."""
    c = linear.circuit
    if not linear.has_signal:
        raise KeyError("the board has no [signal] set-up")
    n, n_f = frequency.shape
    n_cols = len(cols)
    scale = np.ones((n, n_cols)) if scale is None else scale
    out = {name: np.empty((n * n_f, n_cols)) for name in DIFFERENTIATED}
    flat_f = frequency.ravel()
    step = rows_per_chunk(_bytes_per_row(linear, n_cols), share=0.5)
    for sl in chunks(n * n_f, step):
        idx = np.arange(sl.start, sl.stop)
        s = sl if n_f == 1 else idx // n_f  # one frequency: the samples themselves (views)
        dz, z = _two_port_derivatives(linear, v[s], flat_f[idx], s, cols, node_dv[s], scale[s])
        for name, values in _close(linear.params, s, z, dz).items():
            out[name][sl] = values
    return {k: val.reshape(n, n_f, n_cols) for k, val in out.items()}


def _solves(linear: LinearModel, s: np.ndarray, freq: np.ndarray):
    """x_in, x_out and u_in, u_out over every node (rows, n_nodes + 1, 2), 0 at AC
    ground (supplies and gnd)."""
    c = linear.circuit
    pos = c.free_position
    y = linear.admittance(s, freq)
    rows, m = len(freq), len(c.free)
    e = np.zeros((rows, m, 2), dtype=complex)
    e[:, pos[c.input_node], 0] = 1.0
    e[:, pos[c.output_node], 1] = 1.0
    # the pattern (capacitors in) is symmetric: it serves the transposed systems too
    lu = factorisation_for(c, capacitors=True, n_samples=rows)
    x_free = solve_small(y, e, lu)
    u_free = solve_small(np.ascontiguousarray(y.transpose(0, 2, 1)), e, lu)
    x = np.zeros((rows, c.n_nodes + 1, 2), dtype=complex)
    u = np.zeros_like(x)
    x[:, c.free] = x_free
    u[:, c.free] = u_free
    return x, u


def _two_port_derivatives(linear: LinearModel, v: np.ndarray, freq: np.ndarray, s: np.ndarray,
                          cols, node_dv: np.ndarray, scale: np.ndarray):
    """dz (rows, 4, C) and z (rows, 4) in the order z_ii, z_oi, z_io, z_oo."""
    c, p = linear.circuit, linear.params
    x, u = _solves(linear, s, freq)
    i_in, i_out = c.input_node, c.output_node
    z = np.stack([x[:, i_in, 0], x[:, i_out, 0], x[:, i_in, 1], x[:, i_out, 1]], axis=1)
    omega = 2.0 * np.pi * freq
    contraction = np.zeros((len(freq), 4, len(cols)), dtype=complex)
    n_r = len(c.resistor_refs)
    # The branches' own columns, one kind at a time (each column's terms are the same
    # element-wise operations as one column at a time, so the sums are the same).
    groups: dict[str, tuple[list[int], list[int]]] = {}
    for k, col in enumerate(cols):
        if col is not None and col[0] in ("resistor_ohms", "capacitor_farads",
                                          "capacitor_leak_siemens"):
            ks, js = groups.setdefault(col[0], ([], []))
            ks.append(k)
            js.append(col[1])
    for name, (ks, js) in groups.items():
        if name == "resistor_ohms":
            nodes = c.resistor_nodes[js]
            weight = -1.0 / p.resistor_ohms[s][:, js] ** 2
        else:
            nodes = c.branch_nodes[[n_r + j for j in js]]
            weight = ((1j * omega)[:, None] * np.ones(len(js)) if name == "capacitor_farads"
                      else np.ones((len(freq), len(js))))
        a, b = nodes[:, 0], nodes[:, 1]
        du, dx = u[:, a] - u[:, b], x[:, a] - x[:, b]  # (rows, K, 2)
        contraction[:, :, ks] += ((weight * scale[:, ks])[:, None, :]
                                  * du[:, :, _PAIRS_A].transpose(0, 2, 1)
                                  * dx[:, :, _PAIRS_B].transpose(0, 2, 1))
    if len(c.transistor_refs):
        _add_transistors(linear, v, omega, s, cols, node_dv, scale, x, u, contraction)
    return -contraction, z


def _add_transistors(linear: LinearModel, v, omega, s, cols, node_dv, scale, x, u,
                     contraction) -> None:
    """The transistors' part of uᵀ·dY·x, in place (see the module's docstring)."""
    c = linear.circuit
    p = linear.params.take(s)
    terms = device_terms(p)
    vbe, vbc = junction_voltages(c, v)
    temperature = [k for k, col in enumerate(cols) if col is not None and col[0] == "temperature"]
    by_field = {"IS": "is_t", "beta": "beta", "VA": "inv_va", "n": "n_vt"}
    wanted = {"vbe", "vbc"} | {by_field[col[0]] for col in cols
                               if col is not None and col[0] in _DEVICE_FIELDS}
    if temperature:
        wanted |= {"is_t", "n_vt"}
    slopes = devices.conductance_slopes(vbe, vbc, terms.is_t, p.beta, p.beta_r, p.VA, terms.n_vt,
                                        tuple(sorted(wanted)))
    with np.errstate(divide="ignore"):
        kappa = np.where(linear.c_pi()[s] > 0.0, 1.0 / (2.0 * np.pi * p.ft), 0.0)
    # each device column's variable and chain factor d(variable)/d(parameter), (rows, nT)
    # (beta is its own variable: no factor; VT is one per row, broadcast)
    direct = {}
    for field in {col[0] for col in cols if col is not None and col[0] in _DEVICE_FIELDS}:
        if field == "IS":
            chain = terms.dis_dIS
        elif field == "VA":  # the variable is 1/VA
            chain = -(1.0 / p.VA) ** 2
        elif field == "n":
            chain = terms.vt
        else:
            chain = None
        direct[field] = (by_field[field],
                         None if chain is None else np.broadcast_to(chain, vbe.shape))
    for t, (nc, nb, ne) in enumerate(c.transistor_nodes.tolist()):
        pol = c.polarity[t]
        uce, ube = u[:, nc] - u[:, ne], u[:, nb] - u[:, ne]
        xbe, xbc = x[:, nb] - x[:, ne], x[:, nb] - x[:, nc]
        # lever[:, k, q] = u[a_q]·x[b_q] for the four (u, x) of the partials k, the pairs
        # q = a + 2·b in the order of _PAIRS_A, _PAIRS_B: one outer product for all
        us = np.stack([uce, uce, ube, ube], axis=1)  # (rows, 4, 2)
        xs = np.stack([xbe, xbc, xbe, xbc], axis=1)
        lever = (us[:, :, None, :] * xs[:, :, :, None]).reshape(len(omega), 4, 4)
        cap = (1j * omega * kappa[:, t])[:, None] * lever[:, 2]
        lever[:, 0] += cap
        lever[:, 1] += cap
        # Every contraction of this transistor's lever in one einsum (the same sums as
        # one at a time): by VBE, by VBC, then its own parameters' columns.
        own, slope_rows = [], [slopes["vbe"][:, t], slopes["vbc"][:, t]]
        for k, col in enumerate(cols):
            if col is None or col[0] not in _DEVICE_FIELDS or col[1] != t:
                continue
            field, chain = direct[col[0]]
            own.append(k)
            slope_rows.append(slopes[field][:, t] if chain is None
                              else slopes[field][:, t] * chain[:, t, None])
        for k in temperature:
            own.append(k)
            slope_rows.append(slopes["is_t"][:, t] * terms.dis_dT[:, t, None]
                              + slopes["n_vt"][:, t] * terms.dnvt_dT[:, t, None])
        by = np.einsum("rjk,rkq->rjq", np.stack(slope_rows, axis=1), lever)
        by_vbe, by_vbc = by[:, 0], by[:, 1]
        dvbe = pol * (node_dv[:, nb] - node_dv[:, ne])
        dvbc = pol * (node_dv[:, nb] - node_dv[:, nc])
        contraction += by_vbe[:, :, None] * dvbe[:, None, :] + by_vbc[:, :, None] * dvbc[:, None, :]
        if own:
            contraction[:, :, own] += by[:, 2:].transpose(0, 2, 1) * scale[:, None, own]


def _magnitude(w: np.ndarray, dw: np.ndarray) -> np.ndarray:
    """d|w| from dw (rows, C): Re(w̄·dw)/|w| (the caller ignores division by zero)."""
    return np.real(np.conj(w)[:, None] * dw) / np.abs(w)[:, None]


def _close(params, s: np.ndarray, z: np.ndarray, dz: np.ndarray) -> dict[str, np.ndarray]:
    """The quantities' derivatives from the two-port's, as :class:`LinearModel` closes it
    (the load on the output for gain and input resistance, the source on the input for
    the output resistance)."""
    z_ii, z_oi, z_io, z_oo = (z[:, i][:, None] for i in range(4))
    d_ii, d_oi, d_io, d_oo = (dz[:, i] for i in range(4))
    rl, rs = params.load_ohms[s][:, None], params.source_ohms[s][:, None]
    no_load = ~np.isfinite(rl)
    with np.errstate(divide="ignore", invalid="ignore"):
        rl_f = np.where(no_load, 1.0, rl)
        den = rl_f + z_oo
        v_out = np.where(no_load, z_oi, z_oi * rl_f / den)
        d_out = np.where(no_load, d_oi, rl_f * d_oi / den - z_oi * rl_f * d_oo / den**2)
        v_in = np.where(no_load, z_ii, z_ii - z_io * z_oi / den)
        d_in = np.where(no_load, d_ii,
                        d_ii - (d_io * z_oi + z_io * d_oi) / den + z_io * z_oi * d_oo / den**2)
        gain = v_out / v_in
        d_gain = d_out / v_in - v_out * d_in / v_in**2
        src = rs + z_ii
        z_out = z_oo - z_oi * z_io / src
        d_zout = d_oo - (d_oi * z_io + z_oi * d_io) / src + z_oi * z_io * d_ii / src**2
        driven = v_in + rs
        source_gain = v_out / driven
        d_source = d_out / driven - v_out * d_in / driven**2
        return {
            "gain": _magnitude(gain[:, 0], d_gain),
            "source_gain": _magnitude(source_gain[:, 0], d_source),
            "input_resistance": _magnitude(v_in[:, 0], d_in),
            "output_resistance": _magnitude(z_out[:, 0], d_zout),
        }
