"""What the HTML report shows, collected: every analysis run on (board, readings).

:func:`collect_report` runs the fit, error budget, next readings, diagnosis, trim and
(when given) a lot, and keeps their results; :mod:`reconcile.present.report` draws the
figures and renders the page. Code here computes; it never prints or draws.
"""

from __future__ import annotations

import hashlib
from dataclasses import dataclass, field
from datetime import UTC, datetime
from typing import Any

from reconcile.data.readings import Reading, readings_to_csv
from reconcile.model.board import Board

SECTIONS = ("board", "readings", "fit", "budget", "diagnosis", "trim", "lot", "provenance")


@dataclass
class ReportData:
    """Everything the page shows: result dictionaries (their ``to_dict()``) and PNGs.

    ``outcome``, ``design``, ``trim_result`` and ``lot_result`` are the result objects the
    dictionaries came from (the figures are drawn from them); ``plots`` is filled by
    :func:`reconcile.present.report.draw_figures`.
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
    lot: dict | None = None
    plots: dict[str, bytes] = field(default_factory=dict)
    hashes: dict[str, str] = field(default_factory=dict)
    created: str = ""
    outcome: Any = field(default=None, repr=False, compare=False)
    design: Any = field(default=None, repr=False, compare=False)
    trim_result: Any = field(default=None, repr=False, compare=False)
    lot_result: Any = field(default=None, repr=False, compare=False)


def board_as_read(board: Board) -> str:
    """The board as the loader read it (every part and setting, values in SI units), as
    indented JSON text: what the report shows instead of the board file, so that the
    file's comments (and anything else written between its keys) are never copied."""
    import dataclasses
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

    fields = dataclasses.asdict(board)
    for private in ("source_path", "source_text"):
        fields.pop(private, None)
    return json.dumps(plain(fields), indent=1, ensure_ascii=False, allow_nan=False)


def _sha(text: str) -> str:
    return hashlib.sha256(text.encode("utf-8")).hexdigest()


def collect_report(
    board: Board,
    readings: list[Reading],
    *,
    session: dict | None = None,
    lot_result=None,
    lot_plot: bytes | None = None,
    trim_samples: int = 10_000,
    seed: int = 0,
    outcome=None,
    diagnosis=None,
    trim_result=None,
) -> ReportData:
    """Run every analysis on (board, readings).

    ``outcome`` (:class:`reconcile.pipeline.analyses.FitOutcome`), ``diagnosis`` and
    ``trim_result`` may be passed in when they were computed already; ``lot_plot`` is
    the lot's figure (PNG bytes) when a lot is given."""
    import numpy as np

    from reconcile.diagnosis.diagnose import diagnose
    from reconcile.engine.solution import solve
    from reconcile.pipeline.analyses import run_fit
    from reconcile.trim.rework import trim

    data = ReportData(
        board=board,
        readings=list(readings),
        title=board.title or (board.source_path or "board"),
        session=session,
        created=datetime.now(UTC).strftime("%Y-%m-%d %H:%M:%S UTC"),
    )
    data.design = solve(board)
    if outcome is None:
        outcome = run_fit(board, readings)
    data.outcome = outcome
    data.fit = outcome.fit.to_dict()
    data.budget = outcome.budget.to_dict() if outcome.budget is not None else None
    data.next_readings = [s.to_dict() for s in outcome.suggestions]
    diag = diagnosis if diagnosis is not None else diagnose(board, readings)
    data.diagnosis = diag.to_dict()
    if board.spec.targets:
        result = trim_result
        if result is None:
            result = trim(board, outcome.fit, samples=trim_samples, rng=np.random.default_rng(seed))
        data.trim_result = result
        data.trim = result.to_dict()
    if lot_result is not None:
        data.lot_result = lot_result
        data.lot = lot_result.to_dict()
        if lot_plot is not None:
            data.plots["lot"] = lot_plot
    data.hashes = {
        "board_sha256": _sha(board.source_text or ""),
        "readings_sha256": _sha(readings_to_csv(readings)),
    }
    return data
