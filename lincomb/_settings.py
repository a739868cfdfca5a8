"""BLAS threads: the one global setting, and the helpers that apply it (optional threadpoolctl).

Chunked, many-response and Dask fits call BLAS/LAPACK on many blocks of moderate size.  Waking
BLAS worker threads for each call can cost more than the call, and on a machine whose cores are
busy it stalls for milliseconds per call; one thread per block is both faster and steadier.
So work on blocks of rows or responses (chunks, partitions, groups of responses, the row blocks
of a tall in-memory factor) runs on :func:`worker_threads` BLAS threads: one by default, or what
:func:`set_blas_threads` / :func:`blas_threads` chose.

threadpoolctl is not a runtime dependency: without it these helpers do nothing.
"""

from __future__ import annotations

import contextlib
from collections.abc import Iterator
from typing import Any

import numpy as np

from lincomb._docstrings import fill_doc
from lincomb.errors import InputError

_CONTROLLER: Any = None

#: BLAS threads inside workers when nothing is set (see :func:`set_blas_threads`).
DEFAULT_WORKER_THREADS = 1
#: The global setting: ``None`` means :data:`DEFAULT_WORKER_THREADS`.
_WORKER_THREADS: int | None = None


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
    return _Limit([c for c in _CONTROLLER.lib_controllers if c.user_api == "blas"], threads)


class _Limit:
    """Set each BLAS library to ``threads`` threads for a ``with`` block, and back after.

    What threadpoolctl's own ``limit`` does for ``user_api="blas"``, without the report of
    every library it gathers first: a library already at ``threads`` is not touched, so a
    block under a global limit of the same size costs a few ``get_num_threads`` calls.
    """

    __slots__ = ("_libs", "_threads", "_changed")

    def __init__(self, libs: list[Any], threads: int) -> None:
        self._libs = libs
        self._threads = threads
        self._changed: list[tuple[Any, int]] = []

    def __enter__(self) -> None:
        for lib in self._libs:
            before = lib.num_threads
            if before is not None and before != self._threads:
                lib.set_num_threads(self._threads)
                self._changed.append((lib, before))

    def __exit__(self, *exc: object) -> None:
        while self._changed:
            lib, before = self._changed.pop()
            lib.set_num_threads(before)


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


def worker_threads() -> int:
    """BLAS threads for work on blocks of rows or responses, as set globally (default 1).

    Examples
    --------
    >>> worker_threads()
    1
    """
    return DEFAULT_WORKER_THREADS if _WORKER_THREADS is None else _WORKER_THREADS


#: The argument of :func:`set_blas_threads` and :func:`blas_threads` and its refusal.
_THREADS = """\
Parameters
----------
n : int or None
    A positive number of threads, or None for the library default: one BLAS thread for each
    chunk, partition, group of responses and row block (waking more threads for each small
    block costs more than it saves, and on busy cores stalls for milliseconds).

Raises
------
lincomb.errors.InputError
    ``n`` is not a positive whole number or None."""
_threads_doc = fill_doc(threads=_THREADS)


@_threads_doc
def set_blas_threads(n: int | None) -> None:
    """Set the BLAS threads that lincomb's block-wise work uses, for the whole process.

    Chunked fits (each chunk), Dask fits (each partition task), many-response fits (each group
    of responses) and the row blocks of a tall in-memory factor call BLAS on many moderate
    blocks; they run with at most ``n`` BLAS threads.  Other work leaves BLAS as it is.

    %(threads)s

    See Also
    --------
    blas_threads : the same setting for a ``with`` block only.

    Notes
    -----
    Takes effect only when threadpoolctl is installed (it comes with the ``lincomb[dask]``
    extra).  A fitting function's ``blas_threads=k`` argument is this setting for one call:
    ``k`` (a whole number) means ``blas_threads(k)``, the argument's default ``1`` is the
    library default (``None`` here), and ``blas_threads=None`` (leave BLAS alone) corresponds
    to ``n`` = the number of threads BLAS would use anyway (for example ``os.cpu_count()``).
    The setting is a process-wide value read when work starts, not a per-thread one; Dask
    sends it with each task to worker processes.

    Examples
    --------
    >>> import lincomb as lc
    >>> lc.set_blas_threads(2)
    >>> from lincomb._settings import worker_threads
    >>> worker_threads()
    2
    >>> lc.set_blas_threads(None)  # back to the default: one thread in workers
    >>> worker_threads()
    1
    """
    global _WORKER_THREADS
    check_threads(n)
    _WORKER_THREADS = None if n is None else int(n)


@contextlib.contextmanager
@_threads_doc
def blas_threads(n: int | None) -> Iterator[None]:
    """Use ``n`` BLAS threads in lincomb's block-wise work inside a ``with`` block.

    The setting of :func:`set_blas_threads` for the block only; the previous setting is
    restored on leaving it, also when an error is raised.

    %(threads)s

    See Also
    --------
    set_blas_threads : the same setting for the whole process, and how a fitting function's
        ``blas_threads=`` argument maps to it.

    Examples
    --------
    >>> import lincomb as lc
    >>> from lincomb._settings import worker_threads
    >>> with lc.blas_threads(2):
    ...     worker_threads()
    2
    >>> worker_threads()
    1
    """
    global _WORKER_THREADS
    check_threads(n)
    before = _WORKER_THREADS
    _WORKER_THREADS = None if n is None else int(n)
    try:
        yield
    finally:
        _WORKER_THREADS = before
