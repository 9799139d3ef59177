"""One BLAS thread for the model fits.

The fits' products are tall and thin (n x 10); on a busy machine a
multi-threaded BLAS spends far longer waking threads than computing (the
parametric fits measured 5-7x slower with every thread, bench/results/parametric.md).
The scan for BLAS libraries (~10 ms) is done once per process.
"""

from __future__ import annotations

import contextlib

__all__ = ["one_blas_thread"]

_CONTROLLER: list = []


def one_blas_thread() -> contextlib.AbstractContextManager:
    """A context in which BLAS runs on one thread (a no-op without threadpoolctl)."""
    try:
        from threadpoolctl import ThreadpoolController
    except ImportError:  # pragma: no cover - threadpoolctl ships with scikit-learn
        return contextlib.nullcontext()
    if not _CONTROLLER:
        _CONTROLLER.append(ThreadpoolController())
    return _CONTROLLER[0].limit(limits=1, user_api="blas")
