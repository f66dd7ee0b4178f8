"""The kinds the project names, as ``Literal`` types (one place; standard library only).

Each is a closed set of strings as they appear in files and JSON; ``typing.get_args``
lists the allowed values, and the tables the code keeps are made from them (device
regions, fault kinds, rework actions, store analysis kinds).
"""

from __future__ import annotations

from typing import Literal

__all__ = [
    "AnalysisKind", "FaultKind", "HypothesisKind", "LotMode", "ParameterKind", "PartKind", "Polarity",
    "Region", "ReworkAction", "SearchKind", "Transform", "TrimMode", "Verdict",
]

Polarity = Literal["npn", "pnp"]
"""A bipolar transistor's polarity."""

PartKind = Literal["supply", "resistor", "capacitor", "transistor"]
"""The tables of a board file."""

Region = Literal["forward-active", "saturation", "cutoff", "reverse-active"]
"""A transistor's operating region (engine/devices.py ``REGIONS``, in that order)."""

ParameterKind = Literal[
    "resistor", "capacitor", "supply", "IS", "beta", "VA", "n", "temperature", "calibration"
]
"""What a fitted parameter is (inference/priors.py ``FreeParameter.kind``)."""

Transform = Literal["log", "log10", "linear"]
"""A fitted parameter's internal coordinate."""

Verdict = Literal["consistent", "doubtful", "inconsistent", "not-converged"]
"""Whether a fit explains its readings (``FitResult.verdict``)."""

FaultKind = Literal["none", "open", "short", "wrong-value", "missing", "reversed"]
"""A single-fault hypothesis (diagnosis/faults.py)."""

HypothesisKind = Literal[FaultKind, Literal["pair"]]
"""What a hypothesis is: a single fault, or ``pair`` (two faults at once)."""

ReworkAction = Literal["replace", "parallel"]
"""How a rework option changes a resistor."""

TrimMode = Literal["fitted", "design"]
"""Whether a trim starts from a fit or from the drawn board."""

SearchKind = Literal["exhaustive", "pruned"]
"""How a trim searched its combinations."""

LotMode = Literal["jig", "sweep"]
"""Where a lot's devices were measured."""

AnalysisKind = Literal["fit", "diagnose", "trim", "lot", "capture", "report"]
"""The analyses a session records (store ``ANALYSIS_KINDS``)."""
