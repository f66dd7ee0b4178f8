"""Shared pieces of the fit validation tests: synthetic "true" boards drawn inside their
tolerances, the truth as an internal parameter vector, and linear propagation of the
fit's covariance to a spec quantity.

Imported by ``test_fit_recovery.py``, ``test_fit_gum.py``, ``test_fit_meter_loading.py``,
``test_error_budget.py`` and ``test_next_reading.py``.
"""

from __future__ import annotations

import dataclasses
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from reconcile.model.board import Board, DeviceParam
from reconcile.model.board_loader import load_board
from reconcile.engine import BatchSolution, compile_board, nominal_parameters, solve_batch
from reconcile.inference.fitting import FitResult
from reconcile.inference.measure import MeasurementModel, Observation
from reconcile.inference.priors import TEMPERATURE_SD_K, ParameterSpace, build_space
from reconcile.data.readings import Reading
from reconcile.inference.simulate import simulate_readings

SAMPLE_DATA = Path(__file__).resolve().parent.parent / "sample_data"

DEVICE_KEYS = ("IS", "beta", "VA", "n")


def sample_board(name: str) -> Board:
    """One of the invented sample boards in ``sample_data`` (name without ``.toml``)."""
    return load_board(SAMPLE_DATA / f"{name}.toml")


@dataclass(frozen=True)
class Truth:
    """A board as really built: its values as a board, and the junction temperature."""

    board: Board
    temperature_k: float

    def values(self) -> dict[str, float]:
        """Every parameter key of the contract (``R1``, ``Q1.IS``, ...) → true value."""
        b = self.board
        out: dict[str, float] = {}
        out.update({ref: r.ohms for ref, r in b.resistors.items()})
        out.update({ref: c.farads for ref, c in b.capacitors.items()})
        out.update({ref: s.volts for ref, s in b.supplies.items()})
        for ref in b.transistors:
            d = b.device_of(ref)
            for key in DEVICE_KEYS:
                out[f"{ref}.{key}"] = getattr(d, key).value
        out["temperature"] = self.temperature_k
        return out

    def internal(self, space: ParameterSpace) -> np.ndarray:
        """The truth in the internal coordinates of ``space`` (a fit's parameter space)."""
        values = self.values()
        return np.array([p.to_internal(values[p.key]) for p in space.parameters])

    def read(self, plan: list[tuple[str, str]], rng: np.random.Generator | None) -> list[Reading]:
        """Readings of the true board at ``plan`` (meter attached, as the measurement model
        predicts them), with seeded Gaussian noise of each reading's default standard
        uncertainty (none when ``rng`` is None)."""
        return simulate_readings(self.board, plan, rng=rng, temperature=self.temperature_k)

    def solution(self) -> BatchSolution:
        """The engine's solution of the true board (no meter attached)."""
        circuit = compile_board(self.board)
        return solve_batch(circuit, nominal_parameters(circuit, temperature=self.temperature_k))


def draw_truth(board: Board, rng: np.random.Generator, *, spread: str = "prior") -> Truth:
    """A board as it might really be built from ``board``'s drawing.

    Resistors, capacitors and supplies are drawn uniformly within their tolerance (the
    rectangular reading of a tolerance limit, JCGM 100:2008 4.3.7). With ``spread =
    "prior"`` each transistor's device values (IS, beta, and VA or n where they have a
    range) come from the prior of :mod:`reconcile.inference.priors` (Gaussian in the
    internal, logarithmic, coordinate) and the junction temperature from ambient plus a
    Gaussian of ``TEMPERATURE_SD_K``. With ``spread = "datasheet"`` the truths come from
    outside the fit's own prior: every device value with a range is drawn uniformly
    (log-uniformly for IS, beta and VA) across the whole datasheet range, edges as likely
    as the middle, and the temperature uniformly within ±2·``TEMPERATURE_SD_K`` of
    ambient. Each transistor gets a device table of its own.
    """
    if spread not in ("prior", "datasheet"):
        raise ValueError(f"spread must be 'prior' or 'datasheet', not {spread!r}")
    truth = board
    for ref, r in board.resistors.items():
        truth = truth.with_resistor_ohms(ref, r.ohms * (1.0 + r.tolerance * rng.uniform(-1, 1)))
    for c in board.capacitors.values():
        farads = c.farads * (1.0 + c.tolerance * rng.uniform(-1, 1))
        truth = truth.replace_part(dataclasses.replace(c, farads=farads))
    for s in board.supplies.values():
        volts = s.volts * (1.0 + s.tolerance * rng.uniform(-1, 1))
        truth = truth.replace_part(dataclasses.replace(s, volts=volts))
    draw = _device_from_prior(board) if spread == "prior" else _device_from_datasheet
    devices = dict(truth.devices)
    transistors = dict(truth.transistors)
    for ref, q in board.transistors.items():
        device = board.device_of(ref)
        drawn = {key: DeviceParam(value) for key, value in draw(ref, device, rng).items()}
        name = f"truth-{ref}"
        devices[name] = dataclasses.replace(device, name=name, **drawn)
        transistors[ref] = dataclasses.replace(q, device=name)
    truth = dataclasses.replace(truth, devices=devices, transistors=transistors)
    if spread == "prior":
        temperature = board.temperature + TEMPERATURE_SD_K * rng.standard_normal()
    else:
        temperature = board.temperature + TEMPERATURE_SD_K * rng.uniform(-2.0, 2.0)
    return Truth(truth, float(temperature))


def _device_from_prior(board: Board):
    """Device values drawn from the fit's own prior (the free parameters of ``board``)."""
    space = build_space(compile_board(board))

    def draw(ref: str, device, rng: np.random.Generator) -> dict[str, float]:
        out = {}
        for key in DEVICE_KEYS:
            full = f"{ref}.{key}"
            if full in space.keys:
                fp = space.parameters[space.index(full)]
                out[key] = float(fp.to_external(rng.normal(fp.prior_mean, fp.prior_sd)))
        return out

    return draw


def _device_from_datasheet(ref: str, device, rng: np.random.Generator) -> dict[str, float]:
    """Device values drawn uniformly across each datasheet range (log-uniformly where the
    fit works in logarithms: IS, beta, VA); values without a range stay as typed."""
    out = {}
    for key in DEVICE_KEYS:
        p = getattr(device, key)
        if not p.has_range or not np.isfinite(p.value):
            continue
        if key == "n":
            out[key] = float(rng.uniform(p.low, p.high))
        else:
            out[key] = float(np.exp(rng.uniform(np.log(p.low), np.log(p.high))))
    return out


def quantity_gradient(fit: FitResult, quantity: str) -> tuple[float, np.ndarray]:
    """A spec quantity of the fitted board and its gradient in the fit's internal
    coordinates (forward differences, one batched engine call)."""
    model = MeasurementModel(fit.board, [Observation(quantity, "", 0.0, 1.0)], fit.space)
    value, jac = model.jacobian(fit.x)
    return float(value[0]), jac[0]


def quantity_stderr(fit: FitResult, quantity: str) -> float:
    """Linear propagation g·C·gᵀ of the fit's covariance to ``quantity`` (JCGM 100:2008
    law of propagation of uncertainty, first order)."""
    _, g = quantity_gradient(fit, quantity)
    return float(np.sqrt(g @ fit.covariance @ g))

