"""The pipeline's rules about what a result can be trusted for, in one place.

- A rework proposal is worked out from the fitted board. When the fit does not explain
  the readings (its verdict is not ``consistent``), or explains them only with parts
  far outside their tolerances (``FitResult.parts_plausible`` false: the prior penalty's
  own check, kept apart from the verdict), the fitted board may be wrong in a way no
  tolerance covers (a fault), and a rework chosen for it may not restore the spec: the
  trim carries a warning, whichever front end ran it, and a trim that was given no
  diagnosis runs one (:func:`fit_trusted`).
- Which hypothesis an analysis works under (:func:`working_hypothesis`): the one the
  user assumed (``--assume``); else the diagnosis' leading one when it is decisive
  (:attr:`reconcile.diagnosis.diagnose.Diagnosis.decisive`: probability at least 0.9
  and ``testable``) and not ``none``;
  else none (the board as drawn). Under a hypothesis the board is fitted as built, the
  error budget and the report's sections come from that fit, and trim's first option
  repairs it (:mod:`reconcile.pipeline.repair`); each says which hypothesis it used.
- The series resistor of the input-resistance reading enters with the uncertainty of
  its tolerance read as a rectangular distribution
  (:func:`reconcile.data.derived_readings.series_resistor_uncertainty`, re-exported
  here with the other rules).
"""

from __future__ import annotations

from typing import TYPE_CHECKING

from reconcile.data.derived_readings import series_resistor_uncertainty

if TYPE_CHECKING:  # pragma: no cover
    from reconcile.diagnosis.assumed import Assumption
    from reconcile.diagnosis.diagnose import Diagnosis
    from reconcile.inference.fitting import FitResult
    from reconcile.model.board import Board

__all__ = [
    "TRUSTED_VERDICT",
    "fit_trusted",
    "rework_warning",
    "series_resistor_uncertainty",
    "working_hypothesis",
]

TRUSTED_VERDICT = "consistent"
"""The one fit verdict a rework proposal is trusted from without a warning."""


def fit_trusted(fit: FitResult) -> bool:
    """A rework may start from ``fit`` without a diagnosis: its verdict is consistent
    and its parts sit within their tolerances as far as chance allows."""
    return fit.verdict == TRUSTED_VERDICT and fit.parts_plausible


def rework_warning(fit: FitResult | None, diagnosis: Diagnosis | None = None) -> str | None:
    """Why a trim from ``fit`` should not be trusted yet, or None when it can be.

    Design mode (no fit) and a trusted fit (:func:`fit_trusted`) need no warning.
    Otherwise the warning names the fit's verdict (or the parts far outside their
    tolerances) and, when a diagnosis of the same readings is at hand, its leading
    explanation.
    """
    if fit is None or fit_trusted(fit):
        return None
    if fit.verdict == TRUSTED_VERDICT:
        text = (f"the fit explains the readings only with parts far outside their tolerances "
                f"(prior penalty {fit.prior_penalty:.3g}, p = {fit.prior_p_value:.2g}): "
                "the board may have a fault")
    else:
        text = f"the fit's verdict is {fit.verdict}: the board may have a fault"
    if diagnosis is None:
        return text + "; run diagnose before trusting a trim"
    top = diagnosis.top
    if top.fault == "none":
        return text + "; the diagnosis found no fault that explains it either, so check the readings"
    return (
        text + f"; the diagnosis puts {top.label} first (probability {top.probability:.2f}): "
        "repair that and measure again before trusting a trim"
    )


def working_hypothesis(
    board: Board, assume: tuple[str, ...], diagnosis: Diagnosis | None = None
) -> tuple[Assumption | None, str, float | None]:
    """The hypothesis to work under, where it came from (``assumed``, ``diagnosis`` or
    ``drawn``) and its probability (a diagnosis' only)."""
    from reconcile.diagnosis.assumed import assumption_of, parse_assumptions

    if assume:
        return parse_assumptions(board, assume), "assumed", None
    if diagnosis is None:
        return None, "drawn", None
    top = diagnosis.top
    if top.fault == "none" or not diagnosis.decisive:
        return None, "drawn", None
    fitted = tuple((e["ref"], float(e["value"])) for e in top.faults
                   if e["fault"] == "wrong-value" and e["value"] is not None)
    return assumption_of(board, top.fit.fault.parts, fitted), "diagnosis", top.probability
