"""The typer command-line app. ``main`` is the console entry point.

Kept light: ``import reconcile.cli`` loads typer and rich, never numpy-heavy libraries.
"""

from reconcile.cli.app import app, main

__all__ = ["app", "main"]
