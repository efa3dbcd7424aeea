"""One BLAS thread while fitting.

The optimiser (L-BFGS-B), the Laplace Hessians and the sampler's moves do linear
algebra on matrices of about ten by ten. Multi-threaded BLAS gains nothing there,
and on a busy machine its threads spin while waiting for cores: in our
measurements on a shared 2-core machine, scipy's L-BFGS-B spent about 75 % of the
mode-finding time inside BLAS thread synchronisation, and mode finding ran about
four times faster with one thread. The limit applies only while a fitting
function runs (threadpoolctl restores the previous setting afterwards).
"""

from __future__ import annotations

import functools

from threadpoolctl import threadpool_limits

__all__ = ["single_blas_thread"]


def single_blas_thread(func):
    """Decorator: run ``func`` with BLAS limited to one thread."""

    @functools.wraps(func)
    def wrapper(*args, **kwargs):
        with threadpool_limits(limits=1, user_api="blas"):
            return func(*args, **kwargs)

    return wrapper
