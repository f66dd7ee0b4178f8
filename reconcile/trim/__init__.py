"""The least rework that restores the spec: candidates, search, yield.

The package is also the public ``reconcile.trim(board, fit, ...)``: calling it calls
:func:`reconcile.trim.rework.trim`. (The top-level name ``trim`` is this package, so
importing a submodule can never shadow the function with a module.)
"""

from __future__ import annotations

import sys
import types
from typing import Any


class _CallablePackage(types.ModuleType):
    def __call__(self, *args: Any, **kwargs: Any) -> Any:
        from reconcile.trim.rework import trim

        return trim(*args, **kwargs)


sys.modules[__name__].__class__ = _CallablePackage
