"""A progress bar for long batched work, on stderr (never with ``--json``).

rich's progress module is imported only when a display is drawn: a ``--json`` run does
not pay for it.
"""

from __future__ import annotations

import contextlib
from collections.abc import Callable, Iterator

from typing import TYPE_CHECKING

from reconcile.present.console import make_console

if TYPE_CHECKING:
    from rich.progress import Progress

SHOW_FROM_ROWS = 50_000
"""Work of fewer rows finishes in about a second or two: no bar for it."""


def _bar(*extra) -> Progress:
    """The one transient bar on stderr: description, bar, done of total, ``extra``."""
    from rich.progress import BarColumn, MofNCompleteColumn, Progress, TextColumn

    return Progress(TextColumn("{task.description}"), BarColumn(), MofNCompleteColumn(), *extra,
                    console=make_console(stderr=True), transient=True)


@contextlib.contextmanager
def chunk_progress(
    description: str, total: int, *, enabled: bool = True
) -> Iterator[Callable[[int, int], None] | None]:
    """Yield an ``on_progress(done, total)`` callback that drives a transient bar on
    stderr, or None when disabled or when ``total`` is small."""
    if not enabled or total < SHOW_FROM_ROWS:
        yield None
        return
    from rich.progress import TimeRemainingColumn

    progress = _bar(TimeRemainingColumn())
    with progress:
        task = progress.add_task(description, total=total)

        def update(done: int, _total: int) -> None:
            progress.update(task, completed=done)

        yield update


@contextlib.contextmanager
def step_progress(
    description: str, *, enabled: bool = True
) -> Iterator[Callable[[int, int], None] | None]:
    """Yield an ``on_progress(done, total)`` callback for work counted in steps whose
    total is known only as it goes (the pair search of a diagnosis): a transient bar on
    stderr, or None when disabled."""
    if not enabled:
        yield None
        return
    progress = _bar()
    with progress:
        task = progress.add_task(description, total=None)

        def update(done: int, total: int) -> None:
            progress.update(task, completed=done, total=total)

        yield update


Stage = Callable[[str], None]
"""``stage(text)``: the work moves on to ``text`` (shown until the next stage)."""


def _silent_stage(_text: str) -> None:
    """The stage of a disabled display: nothing is drawn."""


@contextlib.contextmanager
def stage_progress(enabled: bool = True) -> Iterator[Stage]:
    """Yield ``stage(text)`` for work that goes through a few named steps (a report, a
    trim, a lot): a transient spinner on stderr with the step and the time it has taken.
    When disabled (``--json``) or when stderr is not a terminal, ``stage`` draws
    nothing, so callers call it either way."""
    if not enabled:
        yield _silent_stage
        return
    console = make_console(stderr=True)
    if not console.is_terminal:
        yield _silent_stage
        return
    from rich.progress import Progress, SpinnerColumn, TextColumn, TimeElapsedColumn

    progress = Progress(SpinnerColumn(), TextColumn("{task.description}"), TimeElapsedColumn(),
                        console=console, transient=True)
    with progress:
        task = progress.add_task("starting", total=None)

        def stage(text: str) -> None:
            progress.update(task, description=text)

        yield stage
