"""Analytic DC sensitivities: d(node voltages, supply and resistor currents)/d(parameters).

At a solved operating point the free-node KCL equations F(v, p) = 0 hold, F being the
current leaving each free node through the branches and into the transistor terminals.
By the implicit function theorem

    dv_free/dp = −J⁻¹ · (∂F/∂p + ∂F/∂v_fixed · dv_fixed/dp),     J = ∂F/∂v_free,

with J the engine's own Newton matrix at the solution (:func:`reconcile.engine.dc.jacobian_at`),
so one factorisation per board gives every column. The fixed nodes are the supplies
(dv/dV_supply = 1 at its own node) and gnd.

∂F/∂p is written out here from the same quantities the engine uses: a branch conductance
g between nodes a and b adds g·(v_a − v_b) to F_a (−R⁻²·(v_a − v_b) per ohm of a resistor);
a transistor parameter moves the terminal currents of
:func:`reconcile.engine.devices.junction_currents` at fixed junction voltages (IS, beta,
VA, n directly; the junction temperature through IS(T) and n·VT). The device equations
themselves are not repeated: only their partial derivatives with respect to IS(T), beta,
VA and n·VT, which the engine's equations do not need.

A supply's current (delivered into the board) is the current leaving its node, so its
derivative is ∂F_supply/∂v · dv/dp + ∂F_supply/∂p; a resistor's current is
(v_a − v_b)/R.

Parameter columns are named ``(field, column)`` after :class:`~reconcile.engine.Parameters`
fields: ``resistor_ohms``, ``capacitor_leak_siemens``, ``supply_volts``, ``IS``,
``beta``, ``VA``, ``n`` (column = the part's index) and ``temperature`` (column 0).
Derivatives are per external unit (per ohm, per ampere of IS, per kelvin...).

A single linear function of the node voltages per sample, w·v (a voltmeter's reading
between two nodes, one per probe board), needs one row of dv/dp only: the adjoint form

    d(w·v)/dp = −λᵀ·(∂F/∂p + ∂F/∂v_fixed · dv_fixed/dp) + w_fixed · dv_fixed/dp,
    Jᵀ·λ = w_free,

one transposed solve per sample whatever the number of parameters
(:func:`dc_functional_sensitivity`).

Rows are processed in chunks under the memory budget (:mod:`reconcile.engine.budget`).
"""

from __future__ import annotations

import functools
from dataclasses import dataclass

import numpy as np

from reconcile.engine import devices
from reconcile.engine.budget import chunks, rows_per_chunk
from reconcile.engine.circuit import FLOAT_SIEMENS, Circuit, Parameters
from reconcile.engine.dc import DCState, jacobian_at
from reconcile.engine.kernel import solve_small
from reconcile.engine.sparse import factorisation_for

FIELDS = ("resistor_ohms", "capacitor_leak_siemens", "supply_volts", "IS", "beta", "VA", "n",
          "temperature")
DEVICE_FIELDS = ("IS", "beta", "VA", "n")


def all_columns(circuit: Circuit) -> tuple[tuple[str, int], ...]:
    """Every parameter column the DC solution depends on, in a fixed order."""
    cols: list[tuple[str, int]] = []
    cols += [("resistor_ohms", j) for j in range(len(circuit.resistor_refs))]
    cols += [("capacitor_leak_siemens", j) for j in range(len(circuit.capacitor_refs))]
    cols += [("supply_volts", j) for j in range(len(circuit.supply_refs))]
    for name in DEVICE_FIELDS:
        cols += [(name, j) for j in range(len(circuit.transistor_refs))]
    if circuit.transistor_refs:
        cols.append(("temperature", 0))
    return tuple(cols)


@dataclass(frozen=True)
class DCSensitivity:
    """Derivatives at the solved point, one row per sample, one column per parameter.

    ``node_v`` (N, n_nodes, P): dV(node)/dp; ``supply_current`` (N, nS, P): d(current
    delivered into the board)/dp; ``resistor_current`` (N, nR, P): d(current from
    nodes[0] to nodes[1])/dp. Rows whose solve did not converge are NaN.
    """

    columns: tuple[tuple[str, int], ...]
    node_v: np.ndarray
    supply_current: np.ndarray
    resistor_current: np.ndarray


@dataclass(frozen=True)
class DeviceTerms:
    """Every transistor's IS(T) and n·VT at the board's temperature (N, nT), and their
    derivatives by IS at 25 C, n and the temperature:
    IS(T) = IS·(T/T0)^xti·exp(Eg/(k/q)·(1/T0 − 1/T)); n·VT = n·(k/q)·T."""

    vt: np.ndarray
    n_vt: np.ndarray
    is_t: np.ndarray
    dis_dIS: np.ndarray
    dis_dT: np.ndarray
    dnvt_dT: np.ndarray


def device_terms(params: Parameters) -> DeviceTerms:
    t = params.temperature[:, None]
    vt = devices.thermal_voltage(t)
    is_t = devices.saturation_current(params.IS, t, params.xti, params.bandgap)
    return DeviceTerms(vt=vt, n_vt=params.n * vt, is_t=is_t, dis_dIS=is_t / params.IS,
                       dis_dT=is_t * (params.xti / t + params.bandgap / (devices.K_OVER_Q * t**2)),
                       dnvt_dT=params.n * devices.K_OVER_Q)


def _device_partials(circuit: Circuit, params: Parameters, vbe: np.ndarray, vbc: np.ndarray,
                     terms: DeviceTerms | None = None):
    """Partial derivatives (npn frame) of ic and ib, at fixed junction voltages, with
    respect to IS (25 C), beta, VA, n and the temperature: dict name -> (dic, dib),
    each (N, nT); ``terms``: :func:`device_terms` of ``params``, when the caller has it."""
    if terms is None:
        terms = device_terms(params)
    vt, n_vt, is_t = terms.vt, terms.n_vt, terms.is_t
    beta, beta_r, va = params.beta, params.beta_r, params.VA
    ef, def_ = devices._exp_continued(vbe / n_vt)
    er, der = devices._exp_continued(vbc / n_vt)
    i_f, i_r = is_t * (ef - 1.0), is_t * (er - 1.0)
    inv_va = 1.0 / va
    q_early = 1.0 - vbc * inv_va
    # d/d is_t
    dic_dis = ((ef - 1.0) - (er - 1.0)) * q_early - (er - 1.0) / beta_r
    dib_dis = (ef - 1.0) / beta + (er - 1.0) / beta_r
    # d/d n_vt
    dif_dnvt = -is_t * def_ * vbe / n_vt**2
    dir_dnvt = -is_t * der * vbc / n_vt**2
    dic_dnvt = (dif_dnvt - dir_dnvt) * q_early - dir_dnvt / beta_r
    dib_dnvt = dif_dnvt / beta + dir_dnvt / beta_r
    dis_dIS, dis_dT, dnvt_dT = terms.dis_dIS, terms.dis_dT, terms.dnvt_dT
    return {
        "IS": (dic_dis * dis_dIS, dib_dis * dis_dIS),
        "beta": (np.zeros_like(i_f), -i_f / beta**2),
        "VA": ((i_f - i_r) * vbc * inv_va**2, np.zeros_like(i_f)),
        "n": (dic_dnvt * vt, dib_dnvt * vt),
        "temperature": (dic_dis * dis_dT + dic_dnvt * dnvt_dT, dib_dis * dis_dT + dib_dnvt * dnvt_dT),
    }


def _bytes_per_row(circuit: Circuit, n_cols: int) -> float:
    size = circuit.n_nodes + 1
    n_b = len(circuit.branch_nodes)
    return 8.0 * (4 * size * size + 4 * size * n_cols + 3 * n_b + 12 * len(circuit.transistor_refs))


def dc_sensitivity(
    circuit: Circuit,
    params: Parameters,
    state: DCState,
    columns: tuple[tuple[str, int], ...] | None = None,
    newton_matrix: np.ndarray | None = None,
) -> DCSensitivity:
    """Analytic DC sensitivities of every sample of ``params`` at ``state`` (the engine's
    solution of the same batch); ``columns`` defaults to :func:`all_columns`;
    ``newton_matrix`` is the solution's (``BatchSolution.newton_matrix``), built here
    when not given."""
    cols = all_columns(circuit) if columns is None else tuple(columns)
    n = params.n_samples
    p = len(cols)
    n_nodes = circuit.n_nodes
    out_v = np.empty((n, n_nodes, p))
    out_s = np.empty((n, len(circuit.supply_refs), p))
    out_r = np.empty((n, len(circuit.resistor_refs), p))
    rows = rows_per_chunk(_bytes_per_row(circuit, p), share=0.5)
    for sl in chunks(n, rows):
        sub = params.take(sl)
        st = _state_rows(state, sl)
        j_free = None if newton_matrix is None else newton_matrix[sl]
        out_v[sl], out_s[sl], out_r[sl] = _chunk(circuit, sub, st, cols, j_free)
    return DCSensitivity(columns=cols, node_v=out_v, supply_current=out_s, resistor_current=out_r)


def dc_functional_sensitivity(
    circuit: Circuit,
    params: Parameters,
    state: DCState,
    weights: np.ndarray,
    columns: tuple[tuple[str, int], ...] | None = None,
    newton_matrix: np.ndarray | None = None,
) -> np.ndarray:
    """d(weights·v)/dp (N, P) of every sample at ``state``, ``weights`` (N, n_nodes + 1)
    one linear function of the node voltages per sample, by the adjoint form (module
    docstring); rows whose solve did not converge are NaN. ``newton_matrix`` as for
    :func:`dc_sensitivity`."""
    cols = all_columns(circuit) if columns is None else tuple(columns)
    n, p = params.n_samples, len(cols)
    out = np.empty((n, p))
    rows = rows_per_chunk(_bytes_per_row(circuit, p), share=0.5)
    for sl in chunks(n, rows):
        sub = params.take(sl)
        st = _state_rows(state, sl)
        j_free = None if newton_matrix is None else newton_matrix[sl]
        out[sl] = _functional_chunk(circuit, sub, st, np.asarray(weights[sl], float), cols,
                                    j_free)
    return out


def _functional_chunk(circuit: Circuit, params: Parameters, state: DCState,
                      weights: np.ndarray, cols, j_free: np.ndarray | None) -> np.ndarray:
    v = np.array(state.v, dtype=float)
    v[:, circuit.gnd] = 0.0
    g = np.concatenate(
        [1.0 / params.resistor_ohms, params.capacitor_leak_siemens, params.probe_siemens], axis=1
    )
    free = circuit.free
    w = weights.copy()
    if len(circuit.dc_floating):
        w[:, circuit.dc_floating] = 0.0  # no DC voltage to speak of
    out = np.zeros((len(v), len(cols)))
    for k, (name, j) in enumerate(cols):  # w_fixed · dv_fixed/dp: a supply's own node
        if name == "supply_volts":
            out[:, k] = w[:, circuit.supply_nodes[j]]
    if len(free):
        if j_free is None:
            j_free = jacobian_at(circuit, params, state)  # (N, nF, nF)
        lam = np.zeros_like(v)
        with np.errstate(all="ignore"):
            lam[:, free] = solve_small(np.swapaxes(j_free, 1, 2), w[:, free, None],
                                       _pattern(circuit, len(v)))[:, :, 0]
        out -= _adjoint_terms(circuit, params, v, g, cols, lam)
    out[~np.asarray(state.converged, dtype=bool)] = np.nan
    return out


def _adjoint_terms(circuit: Circuit, params: Parameters, v: np.ndarray, g: np.ndarray, cols,
                   lam: np.ndarray) -> np.ndarray:
    """λᵀ·(∂F/∂p + ∂F/∂v_fixed·dv_fixed/dp) (N, P) for λ over every node (0 off the free
    ones), term by term: each column touches the few nodes of its own part, so ∂F/∂p
    (N, size, P) is never built (what :func:`_parameter_partials` and
    :func:`_node_rows` hold, read here one entry at a time)."""
    out = np.zeros((len(v), len(cols)))
    q, pol = circuit.transistor_nodes, circuit.polarity
    partials = terms = None
    if len(q):  # the devices at the solution, once for every column
        vbe, vbc = junction_voltages(circuit, v)
        terms = device_terms(params)
        partials = _device_partials(circuit, params, vbe, vbc, terms)
    groups = _column_groups(cols)
    for ks, a_node, b_node, dg in _branch_columns(circuit, groups, g):
        out[:, ks] = dg * (v[:, a_node] - v[:, b_node]) * (lam[:, a_node] - lam[:, b_node])
    if "supply_volts" in groups:
        js_ = (devices.junction_currents(vbe, vbc, terms.is_t, params.beta, params.beta_r,
                                         params.VA, terms.n_vt) if len(q) else None)
        for k, j in zip(*groups["supply_volts"], strict=True):
            out[:, k] = _column_contraction(circuit, g, js_, lam, int(circuit.supply_nodes[j]))
    if len(q) and (set(groups) & {"temperature", *DEVICE_FIELDS}):
        # λ across each transistor's collector and base, from its emitter
        l_ce = lam[:, q[:, 0]] - lam[:, q[:, 2]]
        l_be = lam[:, q[:, 1]] - lam[:, q[:, 2]]
        for name in DEVICE_FIELDS:  # each column its own transistor j
            if name in groups:
                ks, js = groups[name]
                dic, dib = partials[name]
                out[:, ks] += pol[js] * (dic[:, js] * l_ce[:, js] + dib[:, js] * l_be[:, js])
        if "temperature" in groups:  # every transistor, one after another
            dic, dib = partials["temperature"]
            terms = pol * (dic * l_ce + dib * l_be)
            for k in groups["temperature"][0]:
                for t in range(len(q)):
                    out[:, k] += terms[:, t]
    return out


def _branch_columns(circuit: Circuit, groups, g: np.ndarray):
    """For the resistor and capacitor-leak columns (each column its own branch), by
    field: the columns' positions, their branches' two nodes and d(conductance)/dp
    (−g² per ohm of a resistor, 1 for a leak)."""
    n_r = len(circuit.resistor_refs)
    branch = circuit.branch_nodes
    for name in ("resistor_ohms", "capacitor_leak_siemens"):
        if name in groups:
            ks, js = groups[name]
            b = js if name == "resistor_ohms" else n_r + js
            yield ks, branch[b, 0], branch[b, 1], (-g[:, b] ** 2 if name == "resistor_ohms"
                                                   else 1.0)


def _column_groups(cols) -> dict[str, tuple[np.ndarray, np.ndarray]]:
    """The parameter columns by field: field -> (column positions, part indices), each
    in the columns' order; an unknown field is refused."""
    return _groups_of(tuple((str(name), int(j)) for name, j in cols))


@functools.lru_cache(maxsize=64)
def _groups_of(cols: tuple[tuple[str, int], ...]) -> dict[str, tuple[np.ndarray, np.ndarray]]:
    """:func:`_column_groups` of one tuple of columns, made once (the arrays read-only)."""
    groups: dict[str, tuple[list[int], list[int]]] = {}
    for k, (name, j) in enumerate(cols):
        if name not in FIELDS:
            raise KeyError(f"no DC sensitivity for parameter field {name!r} (one of {FIELDS})")
        ks, js = groups.setdefault(name, ([], []))
        ks.append(k)
        js.append(j)
    out = {}
    for name, (ks, js) in groups.items():
        pair = (np.array(ks, dtype=np.intp), np.array(js, dtype=np.intp))
        for arr in pair:
            arr.setflags(write=False)
        out[name] = pair
    return out


def _column_contraction(circuit: Circuit, g: np.ndarray, js, lam: np.ndarray,
                        node: int) -> np.ndarray:
    """λᵀ·∂F/∂v(node) (N,): the branches and transistors that reach ``node``."""
    out = np.zeros(len(lam))
    for b, (a_node, b_node) in enumerate(circuit.branch_nodes.tolist()):
        if node in (a_node, b_node):
            sign = 1.0 if node == a_node else -1.0
            out += sign * g[:, b] * (lam[:, a_node] - lam[:, b_node])
    for t, (nc, nb, ne) in enumerate(circuit.transistor_nodes.tolist()):
        d_be = float(node == nb) - float(node == ne)  # d(v_b − v_e)/dv(node)
        d_bc = float(node == nb) - float(node == nc)
        if d_be or d_bc:
            out += ((lam[:, nc] - lam[:, ne]) * (js.dic_dvbe[:, t] * d_be + js.dic_dvbc[:, t] * d_bc)
                    + (lam[:, nb] - lam[:, ne]) * (js.dib_dvbe[:, t] * d_be
                                                   + js.dib_dvbc[:, t] * d_bc))
    return out


def _state_rows(state: DCState, sl: slice) -> DCState:
    """The solution's rows ``sl``: one chunk of the batch."""
    return DCState(v=state.v[sl], vj=state.vj[sl], converged=state.converged[sl],
                   iterations=state.iterations[sl])


def _chunk(circuit: Circuit, params: Parameters, state: DCState, cols,
           j_free: np.ndarray | None = None):
    v = np.array(state.v, dtype=float)
    v[:, circuit.gnd] = 0.0
    g = np.concatenate(
        [1.0 / params.resistor_ohms, params.capacitor_leak_siemens, params.probe_siemens], axis=1
    )
    # the junction voltages and device terms at the solution, once for both
    point = ((*junction_voltages(circuit, v), device_terms(params))
             if len(circuit.transistor_refs) else None)
    dfdp, dv_fixed = _parameter_partials(circuit, params, v, g, cols, point)
    j_rows = _node_rows(circuit, params, v, g, point)
    dv = _node_derivatives(circuit, params, state, dfdp, dv_fixed, j_rows, j_free)
    d_sup, d_res = _current_derivatives(circuit, params, v, cols, dfdp, j_rows, dv)
    bad = ~np.asarray(state.converged, dtype=bool)
    out_v = dv[:, :circuit.n_nodes, :]
    if bad.any():
        out_v[bad] = np.nan
        d_sup[bad] = np.nan
        d_res[bad] = np.nan
    return out_v, d_sup, d_res


def _pattern(circuit: Circuit, n_samples: int):
    """The fixed-pattern factorisation of the DC Jacobian for a large board or batch
    (its pattern is symmetric, so it serves the transposed systems of the adjoint too),
    or None; :func:`reconcile.engine.kernel.solve_small` uses it where it pays off."""
    return factorisation_for(circuit, capacitors=False, n_samples=n_samples)


def junction_voltages(circuit: Circuit, v: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """npn-frame vbe, vbc (N, nT) from full node voltages."""
    q = circuit.transistor_nodes
    pol = circuit.polarity
    if not len(q):
        return np.zeros((len(v), 0)), np.zeros((len(v), 0))
    return pol * (v[:, q[:, 1]] - v[:, q[:, 2]]), pol * (v[:, q[:, 1]] - v[:, q[:, 0]])


def _parameter_partials(circuit: Circuit, params: Parameters, v: np.ndarray, g: np.ndarray,
                        cols, point=None) -> tuple[np.ndarray, np.ndarray]:
    """∂F/∂p over all nodes (N, size, P), and dv/dp of the fixed nodes (supplies: 1 at
    their own node); ``point`` is (vbe, vbc, :func:`device_terms`) at ``v`` when the
    caller has them."""
    n, size, p = params.n_samples, circuit.n_nodes + 1, len(cols)
    dfdp = np.zeros((n, size, p))
    dv_fixed = np.zeros((n, size, p))
    q = circuit.transistor_nodes
    pol = circuit.polarity
    partials = {}
    if len(q):
        vbe, vbc, terms = point if point is not None else (
            *junction_voltages(circuit, v), device_terms(params))
        partials = _device_partials(circuit, params, vbe, vbc, terms)
    groups = _column_groups(cols)
    for ks, a_node, b_node, dg in _branch_columns(circuit, groups, g):
        dv_b = v[:, a_node] - v[:, b_node]
        dfdp[:, a_node, ks] += dg * dv_b
        dfdp[:, b_node, ks] -= dg * dv_b
    if "supply_volts" in groups:
        ks, js = groups["supply_volts"]
        dv_fixed[:, circuit.supply_nodes[js], ks] = 1.0
    for name in DEVICE_FIELDS:  # each column its own transistor j
        if name in groups:
            ks, js = groups[name]
            dic, dib = partials[name]
            d_ic, d_ib = pol[js] * dic[:, js], pol[js] * dib[:, js]
            dfdp[:, q[js, 0], ks] += d_ic
            dfdp[:, q[js, 1], ks] += d_ib
            dfdp[:, q[js, 2], ks] -= d_ic + d_ib
    if "temperature" in groups:
        dic, dib = partials["temperature"]
        for k in groups["temperature"][0]:
            for t in range(len(q)):
                _add_terminals(dfdp[:, :, k], q[t], pol[t] * dic[:, t], pol[t] * dib[:, t])
    return dfdp, dv_fixed


def _node_rows(circuit: Circuit, params: Parameters, v: np.ndarray, g: np.ndarray,
               point=None) -> np.ndarray:
    """∂F/∂v for the rows of every node (N, size, size): the branches, then the
    transistors' conductances. Its free block is the engine's own Newton matrix.
    ``point`` as for :func:`_parameter_partials`."""
    n, size = params.n_samples, circuit.n_nodes + 1
    branch = circuit.branch_nodes
    q = circuit.transistor_nodes
    j_rows = np.zeros((n, size, size))
    if len(branch):  # g·(v_a − v_b) into F_a, its negative into F_b, branch by branch
        a, b = branch[:, 0], branch[:, 1]
        flat = j_rows.reshape(n, size * size)
        for rows, cols, sign in ((a, a, 1.0), (b, b, 1.0), (a, b, -1.0), (b, a, -1.0)):
            np.add.at(flat.T, rows * size + cols, sign * g.T)
    if len(q):
        vbe, vbc, terms = point if point is not None else (
            *junction_voltages(circuit, v), device_terms(params))
        js = devices.junction_currents(vbe, vbc, terms.is_t, params.beta, params.beta_r,
                                       params.VA, terms.n_vt)
        for t in range(len(q)):
            row_c = (-js.dic_dvbc[:, t], js.dic_dvbe[:, t] + js.dic_dvbc[:, t], -js.dic_dvbe[:, t])
            row_b = (-js.dib_dvbc[:, t], js.dib_dvbe[:, t] + js.dib_dvbc[:, t], -js.dib_dvbe[:, t])
            row_e = tuple(-(x + y) for x, y in zip(row_c, row_b, strict=True))
            for kk, row in enumerate((row_c, row_b, row_e)):
                for jj in range(3):
                    j_rows[:, q[t, kk], q[t, jj]] += row[jj]
    if len(circuit.dc_floating):
        fl = circuit.dc_floating
        j_rows[:, fl, fl] += FLOAT_SIEMENS
    return j_rows


def _node_derivatives(circuit: Circuit, params: Parameters, state: DCState, dfdp: np.ndarray,
                      dv_fixed: np.ndarray, j_rows: np.ndarray,
                      j_free: np.ndarray | None = None) -> np.ndarray:
    """dv/dp of every node (N, size, P) by the implicit function theorem."""
    n = params.n_samples
    free = circuit.free
    fixed = np.concatenate([circuit.supply_nodes, [circuit.gnd]]).astype(np.intp)
    if j_free is None:
        j_free = jacobian_at(circuit, params, state)  # (N, nF, nF)
    rhs = dfdp[:, free, :] + np.einsum("nij,njp->nip", j_rows[:, free][:, :, fixed],
                                       dv_fixed[:, fixed, :])
    dv = dv_fixed.copy()
    if len(free):
        with np.errstate(all="ignore"):
            dv[:, free, :] = -solve_small(j_free, rhs, _pattern(circuit, n))
    dv[:, circuit.gnd, :] = 0.0
    if len(circuit.dc_floating):
        dv[:, circuit.dc_floating, :] = 0.0  # no DC voltage to speak of
    return dv


def _current_derivatives(circuit: Circuit, params: Parameters, v: np.ndarray, cols,
                         dfdp: np.ndarray, j_rows: np.ndarray, dv: np.ndarray):
    """d(supply current)/dp (N, nS, P) and d(resistor current)/dp (N, nR, P)."""
    n, p = params.n_samples, len(cols)
    sup = circuit.supply_nodes
    if len(circuit.supply_refs):
        d_sup = np.einsum("nij,njp->nip", j_rows[:, sup, :], dv) + dfdp[:, sup, :]
    else:
        d_sup = np.zeros((n, 0, p))
    rn = circuit.resistor_nodes
    if not len(circuit.resistor_refs):
        return d_sup, np.zeros((n, 0, p))
    d_res = (dv[:, rn[:, 0], :] - dv[:, rn[:, 1], :]) / params.resistor_ohms[:, :, None]
    ks = np.array([k for k, (name, _) in enumerate(cols) if name == "resistor_ohms"],
                  dtype=np.intp)
    if len(ks):  # each column its own resistor j
        js = np.array([cols[k][1] for k in ks], dtype=np.intp)
        d_res[:, js, ks] -= (v[:, rn[js, 0]] - v[:, rn[js, 1]]) / params.resistor_ohms[:, js] ** 2
    return d_sup, d_res


def _add_terminals(target: np.ndarray, nodes: np.ndarray, d_ic: np.ndarray, d_ib: np.ndarray):
    """Add terminal-current derivatives (into c, b; e carries −(c + b)) to ∂F/∂p rows."""
    target[:, nodes[0]] += d_ic
    target[:, nodes[1]] += d_ib
    target[:, nodes[2]] -= d_ic + d_ib
