"""Limit BLAS threads around small, repeated factorizations (optional threadpoolctl).

Chunked, many-response and Dask fits call BLAS/LAPACK on many blocks of moderate size.  Waking
BLAS worker threads for each call can cost more than the call, and on a machine whose cores are
busy it stalls for milliseconds per call; one thread per block is both faster and steadier.
threadpoolctl is not a runtime dependency: without it these helpers do nothing.
"""

from __future__ import annotations

import contextlib
from typing import Any

import numpy as np

from lincomb.errors import InputError

_CONTROLLER: Any = None


def blas_limit(threads: int | None) -> contextlib.AbstractContextManager[Any]:
    """Context that limits BLAS to ``threads`` threads (``None``, or no threadpoolctl: no-op).

    Examples
    --------
    >>> with blas_limit(1):
    ...     pass
    """
    global _CONTROLLER
    if threads is None:
        return contextlib.nullcontext()
    try:
        from threadpoolctl import ThreadpoolController
    except ImportError:  # pragma: no cover - the test environment has it
        return contextlib.nullcontext()
    if _CONTROLLER is None:
        _CONTROLLER = ThreadpoolController()
    return _CONTROLLER.limit(limits=threads, user_api="blas")


def can_limit() -> bool:
    """True when threadpoolctl is installed, so :func:`blas_limit` takes effect."""
    try:
        import threadpoolctl  # noqa: F401
    except ImportError:  # pragma: no cover - the test environment has it
        return False
    return True


def check_threads(threads: object) -> None:
    """Refuse a thread count that is not a positive whole number (``None`` is fine)."""
    if threads is None:
        return
    if isinstance(threads, bool) or not isinstance(threads, (int, np.integer)) or threads < 1:
        raise InputError(f"blas_threads must be a positive whole number or None, got {threads!r}.")
