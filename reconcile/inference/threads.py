"""Single-threaded BLAS around the small dense problems of the inference layer.

The fits solve and decompose matrices of a few hundred rows at most (a Jacobian, a
posterior covariance). OpenBLAS starts one thread per core for them, and on a small,
busy machine the threads cost more than they save: on a 2-core machine an 8-stage fit
ran 2.9× faster on one thread (measured in this project). ``threadpoolctl`` sets the
BLAS library's thread count for a block and puts it back afterwards, which environment
variables set in a running process cannot do. The libraries are looked up once per
process. ``RECONCILE_BLAS_THREADS=N`` gives the
fits N threads instead.
"""

from __future__ import annotations

import contextlib
import functools
import os

ENVIRONMENT = "RECONCILE_BLAS_THREADS"


@functools.cache
def _controller():
    """One ``ThreadpoolController`` per process: finding the loaded BLAS libraries takes
    tens of milliseconds, longer than a small fit. It sees only libraries loaded before
    it, so scipy's linear algebra (the fits' least squares and SVD, which may bring a
    BLAS of its own beside numpy's) is loaded first."""
    import scipy.linalg  # noqa: F401 - loads scipy's BLAS before the controller looks
    from threadpoolctl import ThreadpoolController

    return ThreadpoolController()


class small_problem_threads(contextlib.ContextDecorator):  # noqa: N801 - used like a function
    """``with small_problem_threads():`` (or as a decorator): BLAS on one thread (or
    ``RECONCILE_BLAS_THREADS``) inside, as it was outside."""

    def _recreate_cm(self):  # a fresh one per decorated call, so nested calls restore right
        return type(self)()

    def __enter__(self):
        text = os.environ.get(ENVIRONMENT, "").strip()
        threads = int(text) if text.isdigit() and int(text) > 0 else 1
        self._limits = _controller().limit(limits=threads, user_api="blas")
        return self

    def __exit__(self, *exc) -> bool:
        self._limits.restore_original_limits()
        return False
