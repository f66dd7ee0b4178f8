"""What the HTML report shows, collected: every analysis run on (board, readings).

:func:`collect_report` runs the pipeline (fit, error budget, next readings, diagnosis,
trim: :func:`reconcile.pipeline.analyses.analyse`, with its policies) and keeps the results
with (when given) a lot's; :mod:`reconcile.present.report` draws the
figures and renders the page. Code here computes; it never prints or draws.
"""

from __future__ import annotations

import hashlib
from dataclasses import dataclass, field
from datetime import UTC, datetime
from typing import TYPE_CHECKING, Any

from reconcile.data.readings import Reading, readings_to_csv
from reconcile.model.board import Board
from reconcile.pipeline.inputs import AnalysisInputs

if TYPE_CHECKING:  # pragma: no cover
    from reconcile.pipeline.analyses import Analysis

SECTIONS = ("board", "readings", "fit", "budget", "diagnosis", "trim", "lot", "provenance")


@dataclass
class ReportData:
    """Everything the page shows: result dictionaries (their ``to_dict()``) and PNGs.

    ``analysis`` (:class:`reconcile.pipeline.analyses.Analysis`), ``outcome`` (its fit),
    ``design``, ``trim_result`` and ``lot_result`` are the result objects the
    dictionaries came from (the figures are drawn from them); ``trim`` carries the
    pipeline's warning when the fit is not trusted; ``plots`` is filled by
    :func:`reconcile.present.report.draw_figures`. ``assumed`` names the hypothesis the
    fit, budget, next readings and trim worked under (None: the board as drawn;
    :func:`reconcile.pipeline.policies.working_hypothesis`).
    """

    board: Board
    readings: list[Reading]
    title: str
    session: dict | None = None
    fit: dict | None = None
    budget: dict | None = None
    next_readings: list[dict] = field(default_factory=list)
    diagnosis: dict | None = None
    trim: dict | None = None
    assumed: dict | None = None
    lot: dict | None = None
    plots: dict[str, bytes] = field(default_factory=dict)
    hashes: dict[str, str] = field(default_factory=dict)
    created: str = ""
    analysis: Any = field(default=None, repr=False, compare=False)
    outcome: Any = field(default=None, repr=False, compare=False)
    design: Any = field(default=None, repr=False, compare=False)
    trim_result: Any = field(default=None, repr=False, compare=False)
    lot_result: Any = field(default=None, repr=False, compare=False)


def board_as_read(board: Board) -> str:
    """The board as the loader read it (every part and setting, values in SI units), as
    indented JSON text: what the report shows instead of the board file, so that the
    file's comments (and anything else written between its keys) are never copied."""
    import json
    import math

    def plain(obj: Any) -> Any:
        if isinstance(obj, dict):
            return {str(k): plain(v) for k, v in obj.items()}
        if isinstance(obj, list | tuple):
            return [plain(v) for v in obj]
        if isinstance(obj, float) and not math.isfinite(obj):
            return str(obj)  # "inf": no Early effect, no probe
        return obj

    return json.dumps(plain(board.to_dict()), indent=1, ensure_ascii=False, allow_nan=False)


def _sha(text: str) -> str:
    return hashlib.sha256(text.encode("utf-8")).hexdigest()


def collect_report(
    inputs: AnalysisInputs | Board,
    readings: list[Reading] | None = None,
    *,
    session: dict | None = None,
    lot_result=None,
    lot_plot: bytes | None = None,
    trim_samples: int | None = None,
    seed: int | None = None,
    analysis: Analysis | None = None,
    on_stage=None,
) -> ReportData:
    """Run every analysis of the pipeline (:func:`reconcile.pipeline.analyses.analyse`)
    on ``inputs`` (or on a board and its readings) and keep the results.

    ``analysis`` may be passed in when it was run already; ``trim_samples`` and ``seed``
    override the inputs' options; ``lot_plot`` is the lot's figure (PNG bytes) when a
    lot is given; ``on_stage(text)`` is told each step as it starts."""
    from reconcile.engine.solution import solve
    from reconcile.pipeline.analyses import analyse

    if isinstance(inputs, Board):
        inputs = AnalysisInputs.from_objects(inputs, readings)
    changes = {k: v for k, v in (("trim_samples", trim_samples), ("seed", seed)) if v is not None}
    if changes:
        inputs = inputs.with_options(**changes)
    board = inputs.board
    data = ReportData(
        board=board,
        readings=inputs.reading_list(),
        title=board.title or (board.source_path or "board"),
        session=session,
        created=datetime.now(UTC).strftime("%Y-%m-%d %H:%M:%S UTC"),
    )
    data.design = solve(board)
    if analysis is None:
        analysis = analyse(inputs, on_stage=on_stage)
    data.analysis = analysis
    working = analysis.working_fit  # under the working hypothesis, when there is one
    data.outcome = working
    data.assumed = working.assumed_dict()
    data.fit = working.fit.to_dict()
    data.budget = working.budget.to_dict() if working.budget is not None else None
    data.next_readings = [s.to_dict() for s in working.suggestions]
    data.diagnosis = analysis.diagnosis.to_dict()
    if analysis.trim is not None:
        data.trim_result = analysis.trim.result
        data.trim = analysis.trim.to_dict()
    if lot_result is not None:
        data.lot_result = lot_result
        data.lot = lot_result.to_dict()
        if lot_plot is not None:
            data.plots["lot"] = lot_plot
    data.hashes = {
        "board_sha256": _sha(board.source_text or ""),
        "readings_sha256": _sha(readings_to_csv(data.readings)),
    }
    return data
