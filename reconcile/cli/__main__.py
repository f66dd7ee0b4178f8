"""``python -m reconcile.cli``."""

from reconcile.cli.app import main

main()
