"""One BLAS thread for the survey's many small matrix products.

The mean shift of terrace levels and the circle fits multiply matrices of a few hundred to a
thousand rows, hundreds of times per image: spreading each product over threads costs more in
waking and waiting than it gains, most of all on a machine whose cores are busy with other work
(measured: the terrace search of a 20 MP survey 2 to 3 times slower with two threads on two
shared cores). With one thread the terrace classes are the same; a level's centre can differ
in its last digit (a threaded product sums in another order), and is then the same on every
machine whatever its number of cores (tests/imaging/test_speed_paths.py checks both ways).
"""

from __future__ import annotations

import contextlib


def one_blas_thread():
    """A context in which BLAS uses one thread (nothing when threadpoolctl is missing)."""
    try:
        from threadpoolctl import threadpool_limits
    except ImportError:
        return contextlib.nullcontext()
    try:
        return threadpool_limits(1, user_api="blas")
    except Exception:  # noqa: BLE001 - an unknown BLAS: run as it is
        return contextlib.nullcontext()


def with_one_blas_thread(fn):
    """Decorate ``fn`` to run under :func:`one_blas_thread`."""
    import functools

    @functools.wraps(fn)
    def run(*args, **kwargs):
        with one_blas_thread():
            return fn(*args, **kwargs)

    return run
