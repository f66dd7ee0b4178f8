"""Single-threaded BLAS around the small dense problems of the inference layer.

The fits solve and decompose matrices of a few hundred rows at most (a Jacobian, a
posterior covariance). OpenBLAS starts one thread per core for them, and on a small,
busy machine the threads cost more than they save: on a 2-core machine an 8-stage fit
ran 2.9× faster on one thread (measured in this project). ``threadpoolctl`` sets the
BLAS library's thread count for a block and puts it back afterwards, which environment
variables set in a running process cannot do. The libraries are looked up once per
process (again once scipy's are loaded). ``RECONCILE_BLAS_THREADS=N`` gives the
fits N threads instead.
"""

from __future__ import annotations

import contextlib
import os
import sys

ENVIRONMENT = "RECONCILE_BLAS_THREADS"


_controllers: dict[bool, object] = {}


def _controller():
    """One ``ThreadpoolController`` per set of loaded BLAS libraries: finding them takes
    tens of milliseconds, longer than a small fit. It sees only libraries loaded before
    it, so one is made again once scipy's linear algebra (which may bring a BLAS of its
    own beside numpy's) has been loaded."""
    scipy_loaded = "scipy.linalg" in sys.modules
    if scipy_loaded not in _controllers:
        from threadpoolctl import ThreadpoolController

        _controllers[scipy_loaded] = ThreadpoolController()
    return _controllers[scipy_loaded]


class small_problem_threads(contextlib.ContextDecorator):  # noqa: N801 - used like a function
    """``with small_problem_threads():`` (or as a decorator): BLAS on one thread (or
    ``RECONCILE_BLAS_THREADS``) inside, as it was outside.

    ``scipy=True`` is for work that runs scipy's linear algebra (the MAP fit's least
    squares and SVD): scipy's BLAS is loaded first so that it is held too. Without it
    only the libraries already loaded are held, so numpy-only work (the batched
    hypothesis and jig fits) does not pay scipy's import, about 2.5 times numpy's own.
    """

    def __init__(self, *, scipy: bool = False):
        self._scipy = scipy

    def _recreate_cm(self):  # a fresh one per decorated call, so nested calls restore right
        return type(self)(scipy=self._scipy)

    def __enter__(self):
        if self._scipy:
            import scipy.linalg  # noqa: F401 - loads scipy's BLAS before the controller looks
        text = os.environ.get(ENVIRONMENT, "").strip()
        threads = int(text) if text.isdigit() and int(text) > 0 else 1
        controller = _controller()
        self._limits = controller.limit(limits=threads, user_api="blas")
        return self

    def __exit__(self, *exc) -> bool:
        self._limits.restore_original_limits()
        return False
