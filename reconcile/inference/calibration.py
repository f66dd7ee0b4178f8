"""Calibration errors shared by the readings of one instrument: nuisance parameters.

Readings taken with the same instrument on the same function and range share that
range's calibration (gain) error: their errors are correlated input quantities (JCGM
100:2008, GUM 5.2). The fit models each such error as a calibration factor ``f`` per
(instrument, quantity, range), a free parameter fitted with the board's own:

* every reading of the group is predicted as ``f × (what the board gives)``;
* ``f`` is fitted as ``ln f``, prior mean 0 and σ the systematic part of the accuracy:
  the proportional part of the registry's default rule as one relative standard
  uncertainty (``relative / divisor``, :mod:`reconcile.model.quantities`), or the
  smallest relative uncertainty a reading of the group was given when that is smaller;
* each reading keeps only the rest as its own, independent uncertainty,
  ``u_random = sqrt(u² − (σ·|reading|)²)``, floored at :data:`RANDOM_FLOOR` of ``u``,
  so that one reading alone weighs as before while N repeats shrink only the random
  part: the standard error tends to ``sqrt(u_sys² + u_random²/N)``.

Readings with no instrument named, of a quantity whose default has no proportional part
(temperature), or of value 0 stay independent, as before. The range in the key is the
rule's auto-selected range (``UncertaintyRule.full_scale``); a quantity with no ranges
has one group per instrument. The factors are reported apart from the board's
parameters (``calibration`` in the fit JSON, docs/formats.md §4) and play no part in
the board itself (:meth:`ParameterSpace.to_parameters` skips them).
"""

from __future__ import annotations

import math
from collections.abc import Iterable

import numpy as np

from reconcile.data.readings import Reading, standard_uncertainty
from reconcile.inference.priors import FreeParameter, ParameterSpace
from reconcile.model import quantities

#: bounds of a calibration factor (far beyond any instrument's stated accuracy)
FACTOR_BOUNDS = (0.5, 2.0)
#: the smallest share of a reading's uncertainty kept as its own random part
RANDOM_FLOOR = 0.1


def calibration_key(reading: Reading) -> str | None:
    """``instrument:quantity[:range]`` of a reading that shares a calibration, else None."""
    instrument = reading.instrument.strip()
    q = quantities.REGISTRY[reading.quantity]
    rule = q.default_uncertainty
    if not instrument or not q.predicted or rule is None or rule.systematic_relative <= 0:
        return None
    if reading.value == 0:
        return None
    full_scale = rule.full_scale(reading.value)
    key = f"{instrument}:{reading.quantity}"
    return key if full_scale is None else f"{key}:{full_scale:g}{q.unit}"


def calibration_parameters(readings: Iterable[Reading]) -> tuple[FreeParameter, ...]:
    """One calibration factor per group of readings that share an instrument's range."""
    sd: dict[str, float] = {}
    ref: dict[str, str] = {}
    for r in readings:
        key = calibration_key(r)
        if key is None:
            continue
        rule = quantities.REGISTRY[r.quantity].default_uncertainty
        relative = standard_uncertainty(r) / abs(r.value)
        sd[key] = min(sd.get(key, rule.systematic_relative), rule.systematic_relative, relative)
        ref[key] = r.instrument.strip()
    lo, hi = (math.log(b) for b in FACTOR_BOUNDS)
    return tuple(
        FreeParameter(key, "calibration", ref[key], -1, "log", 0.0, math.log1p(s), lo, hi,
                      1.0, "")
        for key, s in sd.items()
    )


def calibration_map(
    space: ParameterSpace, readings: list[Reading | None], uncertainty: np.ndarray
) -> tuple[np.ndarray, np.ndarray]:
    """For each reading: the index of its calibration factor in ``space`` (−1 for none)
    and its own random uncertainty (the given one where it has no factor)."""
    index = np.full(len(readings), -1, dtype=int)
    random_u = np.array(uncertainty, dtype=float)
    keys = {p.key: j for j, p in enumerate(space.parameters) if p.kind == "calibration"}
    for k, r in enumerate(readings):
        key = None if r is None else calibration_key(r)
        if key is None or key not in keys:
            continue
        j = keys[key]
        index[k] = j
        systematic = math.expm1(space.parameters[j].prior_sd) * abs(r.value)
        u = random_u[k]
        random_u[k] = max(math.sqrt(max(u * u - systematic * systematic, 0.0)), RANDOM_FLOOR * u)
    return index, random_u
