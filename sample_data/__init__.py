"""The invented sample boards, readings and instrument files (data only, no code).

Installed as ``reconcile.sample_data`` so ``reconcile demo`` finds them through
:mod:`importlib.resources` wherever the package is installed.
"""
