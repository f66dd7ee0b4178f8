"""Boards drawn from the priors straight into the engine parameters of a chunk.

:class:`PriorSampler` is :func:`reconcile.inference.priors.prior_draws` followed by
:meth:`reconcile.inference.priors.ParameterSpace.to_parameters`, for a caller that draws
many chunks in a row (``solve --samples``): the standard normals are drawn into one
buffer, scaled, shifted and clipped there in place, and each parameter's external value
is written into its column of one set of :class:`~reconcile.engine.circuit.Parameters`
arrays made once for the largest chunk; every other field keeps the board's nominal
value. The same generator gives the same draws, value for value, as the two calls it
replaces (the same operations in the same order), with no copies of the nominal arrays.

A chunk's internal vectors and parameters are views of those buffers: the next
:meth:`PriorSampler.draw` overwrites them, so a caller that keeps draws copies them.
"""

from __future__ import annotations

import numpy as np

from reconcile.engine.circuit import Parameters, nominal_parameters
from reconcile.inference.priors import PARAMETERS_FIELD, ParameterSpace


class PriorSampler:
    """Draws of ``space``'s priors, at most ``rows`` boards a chunk, into reused buffers."""

    def __init__(self, space: ParameterSpace, rows: int) -> None:
        self.space = space
        self.rows = int(rows)
        self._mean, self._sd = space.prior_mean, space.prior_sd
        self._lower, self._upper = space.lower, space.upper
        self._z = np.empty((self.rows, space.size))
        self._external = np.empty(self.rows)
        self._params = nominal_parameters(space.circuit, self.rows)
        # (draw column, the parameter, the Parameters array it goes into, its column or
        # None for the one-column temperature); calibration factors are not the board's
        self._targets = [
            (j, fp, getattr(self._params, PARAMETERS_FIELD[fp.kind]),
             None if fp.kind == "temperature" else fp.column)
            for j, fp in enumerate(space.parameters)
            if fp.kind != "calibration"
        ]

    def draw(self, rng: np.random.Generator, m: int) -> tuple[np.ndarray, Parameters]:
        """The next ``m`` (at most :attr:`rows`) boards from ``rng``: their internal
        vectors (m, P) and engine parameters, both views of the buffers."""
        if not 0 <= m <= self.rows:
            raise ValueError(f"a chunk of {m} boards is over the sampler's {self.rows}")
        x = self._z[:m]
        rng.standard_normal(out=x)
        np.multiply(x, self._sd, out=x)
        np.add(self._mean, x, out=x)
        np.clip(x, self._lower, self._upper, out=x)
        ext = self._external[:m]
        for j, fp, array, column in self._targets:
            fp.to_external_into(x[:, j], ext)
            if column is None:
                array[:m] = ext
            else:
                array[:m, column] = ext
        return x, self._params.take(slice(0, m))
