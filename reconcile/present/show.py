"""The public result types seen from a notebook: one-line ``repr`` and ``report()``.

Each exported result type has a ``__repr__`` that returns :func:`brief` (one line, its
numbers through :mod:`reconcile.present.numbers`) and a ``report(console=None)`` method
that calls :func:`show` (prints what its command prints). Both import this module inside
the method; that method-level import is the one upward import the layer contracts allow
(``ignore_imports`` in ``pyproject.toml``), so computing code never imports the
presentation at module level.
"""

from __future__ import annotations

from typing import TYPE_CHECKING, Any

from reconcile.present import numbers

if TYPE_CHECKING:  # pragma: no cover
    from rich.console import Console

__all__ = ["brief", "print_trim_outcome", "show"]


def _quantities(values: dict[str, float] | None, limit: int = 2) -> str:
    from reconcile.model.quantities import quantity

    parts = []
    for name, value in list((values or {}).items())[:limit]:
        try:
            unit = quantity(name).unit
        except KeyError:
            unit = ""
        parts.append(f"{name} {numbers.si(value, unit)}")
    return ", ".join(parts)


def _brief_solution(obj) -> str:
    checks = obj.spec_checks
    spec = "" if not checks else (
        ", meets spec" if all(c.met for c in checks) else ", misses spec")
    small = obj.small_signal or {}
    wanted = list(obj.board.spec.targets) or ["gain", "input_resistance"]
    signal = _quantities({k: small[k] for k in wanted if k in small})
    return f"BoardSolution({obj.board.title or 'board'!r}{spec}" + (
        f", {signal})" if signal else ")")


def _brief_sweep(obj) -> str:
    import math

    def corner(hz: float) -> str:
        return numbers.si(hz, "Hz", 3) if math.isfinite(hz) else "none"

    f = obj.frequency
    return (f"BoardSweep({len(f)} points {numbers.si(f[0], 'Hz', 3)}–{numbers.si(f[-1], 'Hz', 3)}, "
            f"mid-band gain {numbers.plain(obj.midband_gain, 4)}, low corner "
            f"{corner(obj.low_corner)}, high corner {corner(obj.high_corner)})")


def _brief_fit(obj) -> str:
    return (
        f"FitResult({obj.verdict}, χ² {numbers.plain(obj.chi_square, 3)} on "
        f"{numbers.plain(obj.dof, 3)} dof, "
        f"{len(obj.parameters)} parameters)"
    )


def _brief_fit_outcome(obj) -> str:
    budget = "" if obj.budget is None else ", error budget"
    return (
        f"FitOutcome({obj.fit.verdict}, χ² {numbers.plain(obj.fit.chi_square, 3)} on "
        f"{numbers.plain(obj.fit.dof, 3)} dof{budget}, {len(obj.suggestions)} next readings)"
    )


def _brief_hypothesis(h) -> str:
    value = "" if h.value is None else f" = {numbers.si(h.value, 'ohm')}"
    return f"{h.label}{value} p={numbers.plain(h.probability, 3)}"


def _brief_diagnosis(obj) -> str:
    explained = "explained" if obj.explained else "not explained"
    return (
        f"Diagnosis({_brief_hypothesis(obj.top)}, {len(obj.hypotheses)} hypotheses, "
        f"{explained})"
    )


def _brief_trim(obj) -> str:
    best = obj.best
    if best is None:
        head = "no option"
    else:
        change = "; ".join(f"{c.ref} {c.action} {numbers.si(c.value, c.unit, 3)}"
                           for c in best.changes) or "no change"
        y = "" if best.yield_ is None else f", yield {numbers.percent(best.yield_, sign=False)}"
        head = f"best: {change}{y}"
    return f"TrimResult({obj.mode}, {len(obj.options)} options, {head})"


def _brief_trim_outcome(obj) -> str:
    inner = _brief_trim(obj.result)[len("TrimResult("):-1]
    return f"TrimOutcome({inner}{', untrusted fit' if obj.warning else ''})"


def _brief_lot(obj) -> str:
    s = obj.summary
    return (
        f"LotResult({obj.mode}, {s.count} devices, beta {numbers.plain(s.beta_mean, 3)} ± "
        f"{numbers.plain(s.beta_sd, 2)} (sd), {len(obj.outliers)} outliers)"
    )


def _brief_analysis(obj) -> str:
    trim = "" if obj.trim is None else f", {len(obj.trim.result.options)} trim options"
    return (
        f"Analysis(fit {obj.fit.fit.verdict}, diagnosis "
        f"{_brief_hypothesis(obj.diagnosis.top)}{trim})"
    )


def brief(obj: Any) -> str:
    """One line about ``obj`` (a result type of the public API), for its ``repr``."""
    for kind, (line, _) in _views().items():
        if isinstance(obj, kind):
            return line(obj)
    return object.__repr__(obj)


def _print_fit_outcome(obj, console: Console | None) -> None:
    from reconcile.present.console import make_console
    from reconcile.present.escape import markup
    from reconcile.present.render_fit import print_fit, print_intervals

    console = console or make_console()
    assumed = obj.assumed_dict()
    if assumed is not None:
        console.print(
            f"[bold]Fitted as built under {markup(assumed['hypothesis'])}[/] "
            f"({assumed['source']}): the error budget and next readings follow it.")
    print_fit(obj.fit, obj.budget, obj.suggestions, console)
    print_intervals(obj.profile, obj.posterior, console)


def _print_fit(obj, console: Console | None) -> None:
    from reconcile.analysis.error_budget import error_budget
    from reconcile.analysis.next_reading import suggest_next
    from reconcile.present.render_fit import print_fit

    print_fit(obj, error_budget(obj), suggest_next(obj), console)


def print_trim_outcome(obj, console: Console | None = None, *, wide: bool = False) -> None:
    """What ``reconcile trim`` prints (``wide``: its ``--wide`` table)."""
    from reconcile.present.console import make_console
    from reconcile.present.escape import markup
    from reconcile.present.render_trim import print_trim

    repair = obj.repair
    if repair is None:
        print_trim(obj.result, console, wide=wide)
    else:
        hypothesis = f"{repair.label} ({repair.source}" + (
            "" if repair.probability is None else f", probability {repair.probability:.2f}") + ")"
        print_trim(obj.result, console, wide=wide,
                   repair=tuple(s["text"] for s in repair.steps), hypothesis=hypothesis)
    if obj.warning is not None:
        (console or make_console()).print(f"warning: {markup(obj.warning)}")


def _print_analysis(obj, console: Console | None) -> None:
    from reconcile.present.render_diagnosis import print_diagnosis

    _print_fit_outcome(obj.working_fit, console)
    print_diagnosis(obj.diagnosis, console)
    if obj.trim is not None:
        print_trim_outcome(obj.trim, console)


def _print_with(module: str, name: str):
    def printer(obj, console: Console | None) -> None:
        import importlib

        getattr(importlib.import_module(module), name)(obj, console)

    return printer


def _views() -> dict[type, tuple[Any, Any]]:
    """Each exported result type: its one-line view and its terminal view."""
    from reconcile.diagnosis.diagnose import Diagnosis
    from reconcile.diagnosis.scoring import Hypothesis
    from reconcile.engine.solution import BoardSolution
    from reconcile.engine.sweep import BoardSweep
    from reconcile.inference.fitting import FitResult
    from reconcile.lot.characterise import LotResult
    from reconcile.pipeline.analyses import Analysis, FitOutcome, TrimOutcome
    from reconcile.trim.rework import TrimResult

    here = "reconcile.present."
    return {
        BoardSolution: (_brief_solution, _print_with(here + "render_solve", "print_solution")),
        BoardSweep: (_brief_sweep, _print_with(here + "render_sweep", "print_sweep")),
        FitResult: (_brief_fit, _print_fit),
        FitOutcome: (_brief_fit_outcome, _print_fit_outcome),
        Diagnosis: (_brief_diagnosis, _print_with(here + "render_diagnosis", "print_diagnosis")),
        Hypothesis: (lambda h: f"Hypothesis({_brief_hypothesis(h)})", None),
        TrimResult: (_brief_trim, _print_with(here + "render_trim", "print_trim")),
        TrimOutcome: (_brief_trim_outcome, print_trim_outcome),
        LotResult: (_brief_lot, _print_with(here + "render_lot", "print_lot")),
        Analysis: (_brief_analysis, _print_analysis),
    }


def show(obj: Any, console: Console | None = None) -> None:
    """Print ``obj`` (a result type of the public API) as its command prints it."""
    for kind, (_, printer) in _views().items():
        if isinstance(obj, kind) and printer is not None:
            printer(obj, console)
            return
    raise TypeError(f"no terminal view of {type(obj).__name__}")
