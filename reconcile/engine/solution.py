"""Solve one board as drawn: the operating point, small signal, spec check and warnings.

This is the notebook-facing view of the engine for a single board; the engine itself
(:mod:`reconcile.engine`) is batched and is what every analysis calls.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field, replace
from functools import cached_property

import numpy as np

from reconcile.engine import devices
from reconcile.model.board import Board
from reconcile.engine import BatchSolution, compile_board, nominal_parameters, solve_batch
from reconcile.engine.small_signal import LinearModel, SmallSignal
from reconcile.engine.sweep import BoardSweep, Corners, find_corners
from reconcile.engine.sweep import sweep as sweep_response
from reconcile.errors import InputError, SolveError

#: the small-signal quantities a solution reports (the registry's, in its order)
SMALL_SIGNAL_KEYS = SmallSignal.QUANTITIES


@dataclass(frozen=True)
class SpecCheck:
    """One [spec] entry against the solved board. ``margin`` is relative to the target:
    the distance to the nearer limit over the target value, negative when outside."""

    quantity: str
    target: float
    low: float
    high: float
    value: float
    margin: float
    met: bool

    def to_dict(self) -> dict:
        return {
            "target": self.target,
            "low": self.low,
            "high": self.high,
            "value": self.value,
            "margin": self.margin,
            "met": self.met,
        }


def check_spec(board: Board, values: dict[str, float]) -> list[SpecCheck]:
    """Compare small-signal values against the board's [spec] targets."""
    checks = []
    for name, target in board.spec.targets.items():
        value = float(values.get(name, math.nan))
        margin = min(value - target.low, target.high - value) / target.value
        met = bool(target.low <= value <= target.high)
        checks.append(SpecCheck(name, target.value, target.low, target.high, value, margin, met))
    return checks


def check_corners(board: Board, low_hz: float, high_hz: float) -> list[SpecCheck]:
    """Compare the −3 dB corners against ``[spec] low_corner = { max }`` and
    ``high_corner = { min }`` (docs/formats.md §2). A board with no low corner (coupled
    down to DC) meets any ``low_corner`` limit; a model with no high corner (no device or
    probe capacitance given) meets any ``high_corner`` limit, and :func:`board_warnings`
    says that this check then tells nothing. The margin is the distance to the limit
    over the limit."""
    spec = board.spec
    out = []
    if spec.low_corner_max is not None:
        lim = spec.low_corner_max
        value = float(low_hz) if math.isfinite(low_hz) else 0.0
        out.append(SpecCheck("low_corner", lim, 0.0, lim, value, (lim - value) / lim,
                             bool(value <= lim)))
    if spec.high_corner_min is not None:
        lim = spec.high_corner_min
        value = float(high_hz) if math.isfinite(high_hz) else math.inf
        out.append(SpecCheck("high_corner", lim, lim, math.inf, value, (value - lim) / lim,
                             bool(value >= lim)))
    return out


def _finite(x: float) -> float | None:
    x = float(x)
    return x if math.isfinite(x) else None


@dataclass(frozen=True)
class BoardSolution:
    """The solved board: one sample of a :class:`~reconcile.engine.BatchSolution`."""

    board: Board
    batch: BatchSolution
    index: int = 0
    warnings: tuple[str, ...] = field(default=())

    # ----------------------------------------------------------------- values
    def __repr__(self) -> str:
        from reconcile.present.show import brief

        return brief(self)

    def report(self, console=None) -> None:
        """Print what ``reconcile solve`` prints (a rich console, default stdout)."""
        from reconcile.present.show import show

        show(self, console)

    @property
    def nodes(self) -> dict[str, float | None]:
        """DC node voltages; None for a node with no DC path (reached only through
        capacitors, as a signal input or output may be)."""
        i = self.index
        floating = set(self.batch.circuit.dc_floating.tolist())
        return {
            n: (None if k in floating else float(self.batch.node_v[i, k]) + 0.0)
            for k, n in enumerate(self.batch.circuit.node_names)
        }

    @property
    def transistors(self) -> dict[str, dict]:
        b, i = self.batch, self.index
        out = {}
        for k, ref in enumerate(b.circuit.transistor_refs):
            out[ref] = {
                "polarity": self.board.transistors[ref].polarity,
                "ic": float(b.ic[i, k]),
                "ib": float(b.ib[i, k]),
                "ie": float(b.ie[i, k]),
                "vbe": float(b.vbe[i, k]),
                "vce": float(b.vce[i, k]),
                "region": devices.REGIONS[int(b.region[i, k])],
                "gm": float(b.gm[i, k]),
                "rpi": _finite(b.rpi[i, k]),
                "ro": _finite(b.ro[i, k]),
                "power": float(b.transistor_power[i, k]),
            }
        return out

    @property
    def supplies(self) -> dict[str, dict]:
        b, i = self.batch, self.index
        return {
            ref: {
                "volts": float(b.params.supply_volts[i, k]),
                "current": float(b.supply_current[i, k]),
            }
            for k, ref in enumerate(b.circuit.supply_refs)
        }

    @property
    def resistors(self) -> dict[str, dict]:
        b, i = self.batch, self.index
        out = {}
        for k, ref in enumerate(b.circuit.resistor_refs):
            rating = self.board.resistors[ref].rating_w
            out[ref] = {
                "ohms": float(b.params.resistor_ohms[i, k]),
                "current": float(b.resistor_current[i, k]),
                "power": float(b.resistor_power[i, k]),
                "rating": rating,
            }
        return out

    @property
    def small_signal(self) -> dict[str, float] | None:
        ss = self.batch.small_signal
        if ss is None:
            return None
        i = self.index
        out = {"frequency": float(ss.frequency[i])}
        for key in SMALL_SIGNAL_KEYS:
            out[key] = float(getattr(ss, key)[i])
        return out

    @property
    def spec_checks(self) -> list[SpecCheck]:
        checks = check_spec(self.board, self.small_signal or {})
        spec = self.board.spec
        if spec.low_corner_max is not None or spec.high_corner_min is not None:
            c = self.corners
            checks += check_corners(self.board, c.low_corner[0], c.high_corner[0])
        return checks

    @cached_property
    def corners(self) -> Corners:
        """Mid-band gain and the −3 dB corners of this board, root-found
        (:func:`reconcile.engine.sweep.find_corners`; one sample)."""
        linear = self._linear()
        return find_corners(linear)

    def sweep(self, frequencies) -> BoardSweep:
        """The response at ``frequencies`` (Hz), the corners and each capacitor's share
        of the low corner (``solve --sweep``, docs/formats.md §6.4)."""
        return sweep_response(self._linear(), np.asarray(frequencies, dtype=float))

    def _linear(self) -> LinearModel:
        linear = self.batch.linear
        if linear is None:
            raise InputError("the board has no [signal] table, so it has no frequency "
                             "response to sweep", path=self.board.source_path, key="signal")
        return linear.take(slice(self.index, self.index + 1))

    # ---------------------------------------------------------------- outputs
    def to_dict(self) -> dict:
        """The contract's ``solve`` JSON object (plus resistors, spec and warnings)."""
        out = {
            "nodes": self.nodes,
            "transistors": self.transistors,
            "supplies": self.supplies,
            "resistors": self.resistors,
            "small_signal": self.small_signal,
            "temperature": float(self.batch.params.temperature[self.index]),
        }
        spec = self.board.spec
        if (spec.targets or spec.min_vce is not None or spec.low_corner_max is not None
                or spec.high_corner_min is not None):
            out["spec"] = {c.quantity: c.to_dict() for c in self.spec_checks}
            out["meets_spec"] = bool(all(c.met for c in self.spec_checks)) and not any(
                w.startswith("headroom") for w in self.warnings
            )
        out["warnings"] = list(self.warnings)
        return out

    def nodes_frame(self):
        """Node voltages as a pandas DataFrame (index: node, column: volts)."""
        import pandas as pd

        return pd.DataFrame({"volts": self.nodes}).rename_axis("node")

    def transistors_frame(self):
        import pandas as pd

        return pd.DataFrame(self.transistors).T.rename_axis("ref")

    def resistors_frame(self):
        import pandas as pd

        return pd.DataFrame(self.resistors).T.rename_axis("ref")

    def supplies_frame(self):
        import pandas as pd

        return pd.DataFrame(self.supplies).T.rename_axis("ref")


def board_warnings(board: Board, batch: BatchSolution, index: int = 0) -> tuple[str, ...]:
    """Warnings a designer should see: region, headroom, resistor ratings."""
    out = []
    circuit = batch.circuit
    min_vce = board.spec.min_vce
    for k, ref in enumerate(circuit.transistor_refs):
        region = devices.REGIONS[int(batch.region[index, k])]
        vce = float(batch.vce[index, k])
        if region != "forward-active":
            out.append(f"region: {ref} is {region} (VCE = {vce:.3g} V), not forward-active")
        if min_vce is not None and circuit.polarity[k] * vce < min_vce:
            out.append(
                f"headroom: {ref} has |VCE| = {abs(vce):.3g} V, under min_vce = {min_vce:.3g} V"
            )
    for k, ref in enumerate(circuit.resistor_refs):
        rating = board.resistors[ref].rating_w
        power = float(batch.resistor_power[index, k])
        if rating is not None and power > rating:
            out.append(f"rating: {ref} dissipates {power:.3g} W, over its {rating:.3g} W rating")
    return tuple(out)


def solve(board: Board, *, temperature: float | None = None) -> BoardSolution:
    """Solve a board as drawn (nominal values), optionally at another temperature (K).

    Raises
    ------
    SolveError
        If no operating point is found.
    """
    circuit = compile_board(board)
    params = nominal_parameters(circuit, 1, temperature=temperature)
    batch = solve_batch(circuit, params)
    if not bool(np.all(batch.converged)):
        where = board.source_path or board.title or "board"
        raise SolveError(
            f"{where}: no DC operating point found (Newton, gmin and source stepping all failed)"
        )
    sol = BoardSolution(board=board, batch=batch, warnings=board_warnings(board, batch))
    if board.spec.high_corner_min is not None and not math.isfinite(sol.corners.high_corner[0]):
        note = ("high_corner: the model has no upper -3 dB corner (no transistor gives ft "
                "or c_mu, and no probe capacitance), so the high_corner check tells nothing")
        corners = sol.corners
        sol = replace(sol, warnings=(*sol.warnings, note))
        sol.__dict__["corners"] = corners  # the cached_property's value, not solved again
    return sol
