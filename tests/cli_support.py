"""Running the whole command line in-process: the real entry point and its error handler.

``CliRunner.invoke(app, ...)`` bypasses :func:`reconcile.cli.app.main`, whose handler
turns the project's errors into one line and an exit code; :func:`run_cli` calls ``main``
itself inside click's stream isolation, so tests (and the fuzz suite) see exactly what a
user would, without starting a process.
"""

from __future__ import annotations

import importlib
import os
import subprocess
import sys
import traceback
from dataclasses import dataclass

from typer.testing import CliRunner

cli_app = importlib.import_module("reconcile.cli.app")  # the package re-exports `app`


@dataclass(frozen=True)
class Outcome:
    """What one run printed and returned; ``crash`` holds an escaped traceback, if any."""

    exit_code: int
    stdout: str
    stderr: str
    crash: str | None

    @property
    def message_lines(self) -> list[str]:
        """The non-blank lines of stderr."""
        return [ln for ln in self.stderr.splitlines() if ln.strip()]


def run_cli(*args: str, input: str | None = None) -> Outcome:
    """Run ``reconcile ARGS`` in this process through ``main()``."""
    runner = CliRunner()
    old_argv, old_hook = sys.argv, sys.excepthook
    crash = None
    with runner.isolation(input=input) as (out, err, _both):
        sys.argv = ["reconcile", *args]
        cli_app._state["debug"] = False
        try:
            cli_app.main()
            code = 0
        except SystemExit as exit_:
            code = exit_.code if isinstance(exit_.code, int) else (0 if exit_.code is None else 1)
        except BaseException:  # noqa: BLE001 - a traceback is exactly what the tests look for
            crash = traceback.format_exc()
            code = -1
        finally:
            sys.argv, sys.excepthook = old_argv, old_hook  # main() installs its own hook
        sys.stdout.flush()
        sys.stderr.flush()
        stdout = out.getvalue().decode("utf-8", "replace")
        stderr = err.getvalue().decode("utf-8", "replace")
    return Outcome(code, stdout, stderr, crash)


def run_process(*args: str, cwd, env: dict | None = None, preexec_fn=None,
                timeout: float = 900) -> subprocess.CompletedProcess:
    """Run ``reconcile ARGS`` as a new process, as a user does (``env`` adds to the
    environment; ``preexec_fn`` e.g. sets resource limits)."""
    return subprocess.run([sys.executable, "-m", "reconcile", *args], capture_output=True,
                          text=True, cwd=cwd, env={**os.environ, **(env or {})},
                          preexec_fn=preexec_fn, timeout=timeout)
