"""The analysis pipeline: gather inputs → fit → diagnose → trim → record.

The command line, the HTML report, the demo and a notebook all run these steps, so a
rule about the results (:mod:`reconcile.pipeline.policies`) holds whichever front end
ran them:

- :func:`fit_step`: the fit, its error budget (when the board has a spec) and the
  next readings (:class:`FitOutcome`);
- :func:`diagnose_step`: the fault hypotheses (:class:`reconcile.diagnosis.Diagnosis`);
- :func:`trim_step`: the rework proposals, with the warning of
  :func:`~reconcile.pipeline.policies.rework_warning` when the fit is not to be trusted
  (:class:`TrimOutcome`);
- :func:`analyse`: every step the inputs allow, one :class:`Analysis`;
  :meth:`Analysis.record` records each result with the inputs' session.

Code here computes; it never prints (``report()`` methods print through ``present/``).
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass, field
from typing import TYPE_CHECKING, Any

from reconcile.analysis.error_budget import ErrorBudget, error_budget
from reconcile.analysis.next_reading import Suggestion, suggest_next
from reconcile.data.readings import Reading
from reconcile.inference.fitting import FitResult, fit_board
from reconcile.model.board import Board
from reconcile.pipeline.inputs import AnalysisInputs
from reconcile.pipeline.policies import rework_warning, working_hypothesis

if TYPE_CHECKING:  # pragma: no cover
    from reconcile.diagnosis.assumed import Assumption
    from reconcile.diagnosis.diagnose import Diagnosis
    from reconcile.pipeline.repair import Repair
    from reconcile.trim.rework import TrimResult

__all__ = [
    "Analysis",
    "FitOutcome",
    "TrimOutcome",
    "analyse",
    "diagnose_step",
    "fit_step",
    "run_fit",
    "trim_step",
    "wants_trim",
    "with_intervals",
]

Progress = Callable[[int, int], None] | None


@dataclass(frozen=True)
class FitOutcome:
    """The fit, its error budget (None without a spec) and the suggested next readings;
    ``assumed`` is the hypothesis the board was fitted under (None: as drawn) and
    ``source`` where it came from (``assumed``: ``--assume``; ``diagnosis``)."""

    fit: FitResult
    budget: ErrorBudget | None
    suggestions: list[Suggestion]
    assumed: Assumption | None = None
    source: str = "drawn"
    probability: float | None = None
    profile: dict = field(default_factory=dict)
    """``fit --profile``: key → :class:`reconcile.inference.profile.ProfileInterval`."""
    posterior: Any = None
    """``fit --sample``: a :class:`reconcile.inference.sampling.PosteriorSample`."""

    def assumed_dict(self) -> dict | None:
        """The hypothesis fitted under, as the JSON names it (None: the board as drawn)."""
        if self.assumed is None:
            return None
        from reconcile.pipeline.repair import hypothesis_dict

        return hypothesis_dict(self.assumed, self.source, self.probability)

    def to_dict(self) -> dict:
        from reconcile.pipeline.repair import hypothesis_json

        out = self.fit.to_dict()
        out.update(hypothesis_json(self.assumed_dict()))
        out["error_budget"] = self.budget.to_dict() if self.budget is not None else None
        # the version-1 name, kept readable for one version (README: migration notes)
        out["miss_budget"] = out["error_budget"]
        out["next_readings"] = [s.to_dict() for s in self.suggestions]
        if self.profile:
            out["profile"] = {k: v.to_dict() for k, v in self.profile.items()}
        if self.posterior is not None:
            out["posterior"] = self.posterior.to_dict()
        return out

    def __repr__(self) -> str:
        from reconcile.present.show import brief

        return brief(self)

    def report(self, console=None) -> None:
        """Print what ``reconcile fit`` prints."""
        from reconcile.present.show import show

        show(self, console)


@dataclass(frozen=True)
class TrimOutcome:
    """A trim's result and, when the fit it started from is not trusted, why."""

    result: TrimResult
    warning: str | None = None
    repair: Repair | None = None
    """Under a hypothesis, the repair that restores the drawn design: the first option;
    ``result.baseline`` is then the board after it and ``result.options`` reworks of
    the repaired board."""

    def to_dict(self) -> dict:
        out = self.result.to_dict()
        from reconcile.pipeline.repair import hypothesis_json

        out["repair"] = None if self.repair is None else self.repair.to_dict()
        out.update(hypothesis_json(None if self.repair is None else self.repair.hypothesis_dict()))
        if self.warning is not None:
            out["warning"] = self.warning
        return out

    def __repr__(self) -> str:
        from reconcile.present.show import brief

        return brief(self)

    def report(self, console=None) -> None:
        """Print what ``reconcile trim`` prints."""
        from reconcile.present.show import show

        show(self, console)


def run_fit(
    board: Board, readings: list[Reading], *, model_meter: bool = True,
    assumed: Assumption | None = None, source: str = "assumed",
    probability: float | None = None,
) -> FitOutcome:
    """Fit (the board as built under ``assumed``, when given), then the error budget
    (when the board has a spec) and the next readings."""
    if assumed is None:
        result = fit_board(board, readings, model_meter=model_meter)
        return FitOutcome(result, error_budget(result), suggest_next(result))
    result = fit_board(assumed.board, readings, model_meter=model_meter,
                       fixed=assumed.fixed, widened=assumed.widened)
    return FitOutcome(result, error_budget(result), suggest_next(result), assumed, source,
                      probability)


def with_intervals(outcome: FitOutcome, *, profile: tuple[str, ...] = (), sample: int = 0,
                   seed: int = 0) -> FitOutcome:
    """The fit outcome with profile-likelihood intervals of ``profile``'s keys and, when
    ``sample`` > 0, that many steps of posterior sampling (``fit --profile``,
    ``fit --sample``; :mod:`reconcile.inference.profile`,
    :mod:`reconcile.inference.sampling`)."""
    import dataclasses

    extra: dict[str, Any] = {}
    if profile:
        from reconcile.inference.profile import profile_intervals

        extra["profile"] = profile_intervals(outcome.fit, tuple(dict.fromkeys(profile)))
    if sample:
        from reconcile.inference.sampling import sample_posterior

        extra["posterior"] = sample_posterior(outcome.fit, sample, seed=seed)
    return dataclasses.replace(outcome, **extra) if extra else outcome


def _need_readings(inputs: AnalysisInputs, step: str) -> list[Reading]:
    if inputs.readings is None:
        from reconcile.errors import InputError

        raise InputError(f"{step} needs readings (a READINGS file or --session ID)")
    return inputs.reading_list()


def fit_step(inputs: AnalysisInputs) -> FitOutcome:
    """The fit with its error budget and next readings (under ``--assume``, of the board
    as built under that hypothesis)."""
    readings = _need_readings(inputs, "fit")
    assumed, source, _ = working_hypothesis(inputs.board, inputs.options.assume)
    return run_fit(inputs.board, readings, model_meter=inputs.options.model_meter,
                   assumed=assumed, source=source)


def diagnose_step(inputs: AnalysisInputs, *, on_progress: Progress = None) -> Diagnosis:
    """Every fault hypothesis fitted and scored (pairs too when no single one explains)."""
    from reconcile.diagnosis.diagnose import diagnose

    opts = inputs.options
    prior = None if opts.prior_weights is None else dict(opts.prior_weights)
    return diagnose(
        inputs.board, _need_readings(inputs, "diagnose"), prior_weights=prior,
        max_faults=opts.max_faults, on_progress=on_progress,
    )


_UNSET: Any = object()


def trim_step(
    inputs: AnalysisInputs,
    fit: FitResult | None = _UNSET,
    *,
    diagnosis: Diagnosis | None = None,
    working: FitOutcome | None = None,
) -> TrimOutcome:
    """Rework proposals from ``fit`` (fitted here when not given; design mode without
    readings), with the untrusted-fit warning of
    :func:`~reconcile.pipeline.policies.rework_warning`.

    Under a hypothesis (``--assume``, or ``diagnosis`` decisive;
    :func:`~reconcile.pipeline.policies.working_hypothesis`) the first option is its
    repair and the options rework the repaired board (:mod:`reconcile.pipeline.repair`);
    ``working`` is the fit under that hypothesis when already made."""
    import numpy as np

    from reconcile.trim.rework import trim

    opts = inputs.options
    if opts.assume and inputs.readings is None:
        from reconcile.errors import InputError

        raise InputError("--assume needs readings (a READINGS file or --session ID): it "
                         "says how the board was built, and design mode trims the drawn one")
    if working is None and inputs.readings is not None:
        if diagnosis is None and not opts.assume:
            fit, diagnosis = _drawn_fit_and_diagnosis(inputs, fit)
        assumed, source, p = working_hypothesis(inputs.board, opts.assume, diagnosis)
        if assumed is not None:
            working = run_fit(inputs.board, inputs.reading_list(), model_meter=opts.model_meter,
                              assumed=assumed, source=source, probability=p)
    repair = start = None
    if working is not None and working.assumed is not None:
        from reconcile.pipeline.repair import repair_of, repaired_posterior

        fit = working.fit
        repair = repair_of(working.assumed, working.source, working.probability)
        start = repaired_posterior(repair, fit)
    elif fit is _UNSET:
        fit = None if inputs.readings is None else fit_board(
            inputs.board, inputs.reading_list(), model_meter=opts.model_meter
        )
    result = trim(
        inputs.board,
        start if start is not None else fit,
        max_changes=opts.max_changes,
        top=opts.top,
        samples=opts.trim_samples,
        rng=np.random.default_rng(opts.seed),
    )
    return TrimOutcome(result, rework_warning(fit, diagnosis), repair)


def _drawn_fit_and_diagnosis(
    inputs: AnalysisInputs, fit: FitResult | None
) -> tuple[FitResult, Diagnosis | None]:
    """The fit of the board as drawn (``fit``, or made here) and, when it is not trusted
    (policies.fit_trusted), the diagnosis a trim then follows (policies.working_hypothesis)."""
    from reconcile.pipeline.policies import fit_trusted

    if fit is _UNSET or fit is None:
        fit = fit_board(inputs.board, inputs.reading_list(),
                        model_meter=inputs.options.model_meter)
    if fit_trusted(fit):
        return fit, None
    return fit, diagnose_step(inputs)


def wants_trim(board: Board) -> bool:
    """Whether :func:`analyse` trims: the board has [spec] targets to restore."""
    return bool(board.spec.targets)


@dataclass(frozen=True)
class Analysis:
    """Every step the inputs allowed: fit, diagnosis and (with spec targets) trim."""

    inputs: AnalysisInputs = field(repr=False)
    fit: FitOutcome
    diagnosis: Diagnosis
    trim: TrimOutcome | None = None
    hypothesis_fit: FitOutcome | None = None
    """The fit under the diagnosis' decisive leading hypothesis, when it was worked under
    (:func:`~reconcile.pipeline.policies.working_hypothesis`) and ``fit`` is not."""

    @property
    def working_fit(self) -> FitOutcome:
        """The fit the error budget, the report's sections and trim follow: under the
        working hypothesis when there is one."""
        return self.hypothesis_fit if self.hypothesis_fit is not None else self.fit

    def results(self) -> dict[str, dict]:
        """Each step's result dictionary by record kind (``fit``, ``diagnose``, ``trim``);
        ``fit`` is the fit as asked for (the fit under a diagnosis' hypothesis is in
        ``trim``'s ``assumed`` and the report)."""
        out = {"fit": self.fit.to_dict(), "diagnose": self.diagnosis.to_dict()}
        if self.trim is not None:
            out["trim"] = self.trim.to_dict()
        return out

    def to_dict(self) -> dict:
        return self.results()

    def record(self) -> dict[str, dict]:
        """Record every result with the inputs' session; what was recorded, by kind
        (empty for inputs from files or code)."""
        done = {}
        for kind, result in self.results().items():
            recorded = self.inputs.record(kind, result)
            if recorded is not None:
                done[kind] = recorded
        return done

    def __repr__(self) -> str:
        from reconcile.present.show import brief

        return brief(self)

    def report(self, console=None) -> None:
        """Print what ``fit``, ``diagnose`` and ``trim`` print, one after another."""
        from reconcile.present.show import show

        show(self, console)


def analyse(
    inputs: AnalysisInputs,
    *,
    fit: FitOutcome | None = None,
    diagnosis: Diagnosis | None = None,
    trim: TrimOutcome | None = None,
    on_progress: Progress = None,
    on_stage: Callable[[str], None] | None = None,
) -> Analysis:
    """Fit, diagnose and (when the board has spec targets) trim; a step already run may
    be passed in and is not run again. ``on_stage(text)`` is told each step as it
    starts (a progress display)."""
    stage = on_stage or (lambda _text: None)
    if fit is None:
        stage("fitting the board to its readings")
    outcome = fit if fit is not None else fit_step(inputs)
    if diagnosis is None:
        stage("weighing the fault hypotheses")
    diag = diagnosis if diagnosis is not None else diagnose_step(inputs, on_progress=on_progress)
    hypothesis_fit = None
    if outcome.assumed is None:
        assumed, source, p = working_hypothesis(inputs.board, inputs.options.assume, diag)
        if assumed is not None:
            stage(f"fitting the board as built under {assumed.label}")
            hypothesis_fit = run_fit(
                inputs.board, inputs.reading_list(), model_meter=inputs.options.model_meter,
                assumed=assumed, source=source, probability=p)
    working = hypothesis_fit or outcome
    trimmed = trim
    if trimmed is None and wants_trim(inputs.board):
        stage("searching reworks and their yield")
        trimmed = trim_step(inputs, working.fit, diagnosis=diag, working=working)
    return Analysis(inputs, outcome, diag, trimmed, hypothesis_fit)
