"""Sweeps of invented transistors with a known truth, for tests, benchmarks and demos.

The terminal currents come from the one device model (:mod:`reconcile.engine.devices`).
"""

from __future__ import annotations

import math

import numpy as np

from reconcile.data.sweep_file import DEFAULT_TEMPERATURE_K, SweepSet
from reconcile.engine import devices

__all__ = ["simulate_sweeps"]


def simulate_sweeps(
    names: list[str],
    is_25c: np.ndarray,
    beta: np.ndarray,
    n: np.ndarray,
    ic_targets: np.ndarray,
    *,
    vce_v: float = 5.0,
    va_v: float = math.inf,
    temperature_k: float = DEFAULT_TEMPERATURE_K,
    r_emitter_ohm: np.ndarray | float = 0.0,
    u_vbe_v: float = 50e-6,
    u_ic_rel: float = 5e-4,
    u_ib_rel: float = 1e-3,
    rng: np.random.Generator | None = None,
) -> SweepSet:
    """Sweeps of invented npn devices with known truth (for tests, benchmarks, demos).

    For each device and each target collector current (``ic_targets``, (K,) or (D, K),
    A) the intrinsic junction voltage is the closed-form inverse of the device
    equation, the terminal currents come from :func:`reconcile.devices.junction_currents`
    at VBC = VBE − ``vce_v`` (beta_r = 1), and the measured VBE adds
    ``r_emitter_ohm``·IE (an emitter lead resistance). With ``rng`` every value is
    disturbed by Gaussian noise of its standard uncertainty: ``u_vbe_v`` (V),
    ``u_ic_rel``·IC and ``u_ib_rel``·IB, which are also written as the points' u.
    """
    d = len(names)
    is_25c, beta, n = (np.broadcast_to(np.asarray(v, float), (d,)) for v in (is_25c, beta, n))
    targets = np.broadcast_to(np.asarray(ic_targets, float), (d, np.shape(ic_targets)[-1]))
    t = np.full(d, float(temperature_k))
    is_t = devices.saturation_current(is_25c, t)[:, None]
    n_vt = (n * devices.thermal_voltage(t))[:, None]
    vbe_int = n_vt * np.log(targets / is_t + 1.0)
    for _ in range(3):  # the Early factor depends on VBC, so iterate the inversion
        vbc = vbe_int - vce_v
        q = 1.0 - vbc / va_v
        vbe_int = n_vt * np.log(targets / (is_t * q) + 1.0)
    st = devices.junction_currents(vbe_int, vbe_int - vce_v, is_t, beta[:, None], 1.0, va_v, n_vt)
    ie = st.ic + st.ib
    vbe = vbe_int + np.asarray(r_emitter_ohm, float).reshape(-1, 1) * ie
    ic, ib = st.ic, st.ib
    u_vbe = np.full_like(vbe, u_vbe_v)
    u_ic, u_ib = u_ic_rel * np.abs(ic), u_ib_rel * np.abs(ib)
    if rng is not None:
        vbe = vbe + u_vbe * rng.standard_normal(vbe.shape)
        ic = ic + u_ic * rng.standard_normal(ic.shape)
        ib = ib + u_ib * rng.standard_normal(ib.shape)
    mask = np.ones(vbe.shape, dtype=bool)
    return SweepSet(tuple(names), vbe, ic, ib, u_vbe, u_ic, u_ib, np.full_like(vbe, vce_v),
                    mask, t, np.ones(d))
