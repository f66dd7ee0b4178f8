"""Readings of a hidden "true" board, made with the engine (for demos and tests).

The true board is a :class:`~reconcile.board.Board` with the values that were really
built; readings of it are predicted by the same measurement model the fit uses and,
optionally, disturbed by Gaussian noise of each reading's standard uncertainty.
"""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np

from reconcile.model.board import Board
from reconcile.inference.catalogue import GUIDED_CAPTURE_BENCH, readings_one_could_take
from reconcile.model.quantities import QuantityKind
from reconcile.inference.measure import MeasurementModel, Observation
from reconcile.data.readings import Reading, default_uncertainty
from reconcile.model.quantities import REGISTRY


PlanEntry = tuple[str, str] | tuple[str, str, float | None]
"""One place to read: (quantity, at), or (quantity, at, frequency in Hz) for a
small-signal reading at its own frequency (None: the board's ``[signal] frequency``)."""


def full_plan(board: Board, *, small_signal: bool = True) -> list[tuple[str, str]]:
    """What a careful engineer reads first: the catalogue's readings on the guided-capture
    bench (every node voltage with a DC path, every supply current and, with
    ``[signal]``, gain and input resistance), as a capture plans them."""
    return [
        e.place for e in readings_one_could_take(board, bench=GUIDED_CAPTURE_BENCH)
        if small_signal or e.kind is not QuantityKind.SMALL_SIGNAL
    ]


def simulate_readings(
    true_board: Board,
    plan: Sequence[PlanEntry],
    *,
    rng: np.random.Generator | None = None,
    temperature: float | None = None,
    relative_noise: float = 1.0,
    note: str = "simulated",
) -> list[Reading]:
    """Readings of ``true_board`` at the places in ``plan``: (quantity, at), or
    (quantity, at, frequency) for a small-signal reading at its own frequency (Hz).

    Each reading carries its default standard uncertainty; with ``rng`` it is disturbed
    by that much Gaussian noise times ``relative_noise``. ``temperature`` (K) is the true
    junction temperature (default: the board's).
    """
    obs = [Observation(item[0], item[1], 0.0, 1.0, frequency=item[2] if len(item) > 2 else None)
           for item in plan if item[0] != "temperature"]
    model = MeasurementModel(true_board, obs)
    params = model.parameters(
        np.zeros((1, 0)) if model.space.size == 0 else model.space.prior_mean[None, :]
    )
    if temperature is not None:
        params = params.with_values(temperature=np.full(params.n_samples, temperature))
    from reconcile.engine import solve_batch

    sol = solve_batch(model.circuit, params)
    exact = model.predict(model.space.prior_mean[None, :], solution=sol)[0]
    out = []
    for k, ob in enumerate(obs):
        proto = Reading.from_si(ob.quantity, ob.at, float(exact[k]))
        u = default_uncertainty(proto) if exact[k] != 0 else 1e-6
        value = float(exact[k])
        if rng is not None:
            value += relative_noise * u * rng.standard_normal()
            if REGISTRY[ob.quantity].non_negative:
                value = abs(value)  # a magnitude (rms ratio, |Z|) reads as one, noise folded
        out.append(Reading.from_si(ob.quantity, ob.at, value, u, note=note,
                                   frequency=ob.frequency))
    return out
