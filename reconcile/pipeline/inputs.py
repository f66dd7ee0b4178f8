"""What an analysis runs on, built once: :class:`AnalysisInputs` and :class:`AnalysisOptions`.

Every front end (the command line, the HTML report, the demo, a notebook) gathers its
board and readings here, from files or from a stored session, and the pipeline
(:mod:`reconcile.pipeline.analyses`) runs on the result. Where the inputs came from
decides where a result is recorded: a session's results go back into its store, with a
digest of exactly what was analysed (:func:`reconcile.data.digest.inputs_sha256`).
Small-signal readings naming a meter of ``[bench] instruments`` at a frequency outside
its specified band are flagged here, whichever way they came in
(:mod:`reconcile.pipeline.meter_bands`).
"""

from __future__ import annotations

import dataclasses
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Literal

from reconcile.data.readings import Reading
from reconcile.errors import InputError
from reconcile.model.board import Board
from reconcile.pipeline.meter_bands import flag_readings_outside_bands

Origin = Literal["files", "session", "objects"]
"""Where the inputs came from: files on disk, a stored session, or objects made in code."""

__all__ = ["AnalysisInputs", "AnalysisOptions", "Origin"]


@dataclass(frozen=True)
class AnalysisOptions:
    """The settings of the pipeline's steps (each command's options map onto these).

    ``seed`` seeds the trim's Monte Carlo yield, so the same inputs and options give the
    same rework options through every front end. ``assume`` holds the ``--assume``
    texts: the hypothesis the board is analysed under
    (:mod:`reconcile.diagnosis.assumed`).
    """

    model_meter: bool = True
    prior_weights: Mapping[str, float] | None = None
    max_faults: int | None = None
    max_changes: int = 2
    top: int = 10
    trim_samples: int = 10_000
    seed: int = 0
    assume: tuple[str, ...] = ()


@dataclass(frozen=True)
class AnalysisInputs:
    """A board, its readings (None: design mode), the options, and where they came from.

    Build one with :meth:`from_files`, :meth:`from_session`, :meth:`from_objects` or
    (the command line's one call) :meth:`gather`. ``store`` is a store location (path
    or URL, None for the default) or an open :class:`reconcile.store.Store`.
    ``notices`` are the readings loader's notes; ``warnings`` the readings flagged
    against their meters' bands (:mod:`reconcile.pipeline.meter_bands`), also noted as
    input warnings for the command line.
    """

    board: Board
    readings: tuple[Reading, ...] | None
    options: AnalysisOptions = field(default_factory=AnalysisOptions)
    origin: Origin = "objects"
    board_path: str | None = None
    readings_path: str | None = None
    session: str | None = None
    store: Any = field(default=None, repr=False, compare=False)
    digest: str | None = None
    notices: tuple[str, ...] = ()
    warnings: tuple[str, ...] = ()

    # ------------------------------------------------------------ building
    @classmethod
    def from_objects(
        cls,
        board: Board,
        readings: Sequence[Reading] | None,
        options: AnalysisOptions | None = None,
    ) -> AnalysisInputs:
        """Inputs made in code (a notebook, a test)."""
        return cls(
            board=board,
            readings=None if readings is None else tuple(readings),
            options=options or AnalysisOptions(),
            origin="objects",
            warnings=tuple(flag_readings_outside_bands(board, readings)),
        )

    @classmethod
    def from_files(
        cls,
        board_path: str | Path,
        readings_path: str | Path | None = None,
        options: AnalysisOptions | None = None,
    ) -> AnalysisInputs:
        """A board file and (optionally) a readings file; the loader's notices kept."""
        from reconcile.model.board_loader import load_board

        board = load_board(board_path)
        readings: tuple[Reading, ...] | None = None
        notices: list[str] = []
        if readings_path is not None:
            from reconcile.data.readings import load_readings

            readings = tuple(load_readings(readings_path, board, notices=notices))
        return cls(
            board=board,
            readings=readings,
            options=options or AnalysisOptions(),
            origin="files",
            board_path=str(board_path),
            readings_path=None if readings_path is None else str(readings_path),
            notices=tuple(notices),
            warnings=tuple(flag_readings_outside_bands(
                board, readings, None if readings_path is None else str(readings_path))),
        )

    @classmethod
    def from_session(
        cls,
        session: str,
        *,
        store: Any = None,
        board_path: str | Path | None = None,
        options: AnalysisOptions | None = None,
    ) -> AnalysisInputs:
        """A stored session's board and current readings (``board_path`` overrides the
        board); results are recorded with the session."""
        from reconcile.data.digest import inputs_sha256

        if hasattr(store, "session_inputs"):  # an open Store
            board, readings = store.session_inputs(session)
        else:
            from reconcile.store.sessions import analysis_inputs

            board, readings, _ = analysis_inputs(session, store=store)
        if board_path is not None:
            from reconcile.model.board_loader import load_board

            board = load_board(board_path)
        return cls(
            board=board,
            readings=tuple(readings),
            options=options or AnalysisOptions(),
            origin="session",
            board_path=None if board_path is None else str(board_path),
            session=session,
            store=store,
            digest=inputs_sha256(board, readings),
            warnings=tuple(flag_readings_outside_bands(board, readings, f"session {session}")),
        )

    @classmethod
    def gather(
        cls,
        board_path: str | Path | None,
        readings_path: str | Path | None,
        session: str | None,
        store: Any,
        command: str,
        *,
        options: AnalysisOptions | None = None,
        readings_optional: bool = False,
    ) -> AnalysisInputs:
        """What a command was given: files, or ``--session`` (with an optional board
        file); one-line :class:`InputError` for a missing or doubled input."""
        if session is not None:
            if readings_path is not None:
                raise InputError(f"{command}: give either READINGS or --session, not both")
            return cls.from_session(session, store=store, board_path=board_path, options=options)
        if board_path is None:
            raise InputError(f"{command} needs a BOARD file (or --session ID)")
        if readings_path is None and not readings_optional:
            raise InputError(f"{command} needs a READINGS file (or --session ID)")
        return cls.from_files(board_path, readings_path, options)

    def with_options(self, **changes: Any) -> AnalysisInputs:
        """The same inputs with some options changed."""
        return dataclasses.replace(self, options=dataclasses.replace(self.options, **changes))

    # ------------------------------------------------------------ using
    def reading_list(self) -> list[Reading]:
        """The readings as a fresh list (the analyses take lists); [] in design mode."""
        return list(self.readings or ())

    def record(self, kind: str, result: dict) -> dict | None:
        """Record ``result`` (what ``--json`` prints) with the session the inputs came
        from, and the hypothesis it worked under (its ``assumed`` and ``hypothesis``,
        stored in a column of their own); None (nothing recorded) for inputs from files or code."""
        if self.origin != "session" or self.session is None:
            return None
        digest = self.digest or ""
        meta = result.get("hypothesis")
        assumed = None if not result.get("assumed") or not isinstance(meta, dict) else {
            "hypothesis": meta.get("label"), "faults": result["assumed"],
            "source": meta.get("source"), "probability": meta.get("probability")}
        if hasattr(self.store, "record_analysis"):  # an open Store
            analysis = self.store.record_analysis(self.session, kind, result,
                                                  inputs_sha256=digest, assumed=assumed)
            return {"session": self.session.strip().upper(), "analysis": analysis}
        from reconcile.store.sessions import record_analysis

        return record_analysis(self.session, kind, result, inputs_sha256=digest,
                               store=self.store, assumed=assumed)
