"""``python -m reconcile``: the command-line app."""

from reconcile.cli.app import main

main()
