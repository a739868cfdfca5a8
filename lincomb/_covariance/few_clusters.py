"""The few-clusters warning, pointed at the user's line whichever public call led to it."""

from __future__ import annotations

import contextlib
import inspect
import os
import threading
import warnings
from collections.abc import Iterator, Sequence
from typing import Any

from lincomb.errors import FewClustersWarning

__all__ = ["FEW_CLUSTERS", "REMEDIES", "recorded_warnings", "warn_few_clusters"]

#: Fewer clusters than this draw a :class:`~lincomb.errors.FewClustersWarning`.
FEW_CLUSTERS: int = 30


#: What the few-clusters warning suggests.
REMEDIES: str = (
    " Remedies: lc.clustered(by=..., adjust='bias-reduced') (residuals adjusted for leverage,"
    " small-sample df for each test) or adjust='jackknife', or lc.wild_bootstrap(fit,"
    " restrictions, by=...) (a wild cluster bootstrap of the restricted model)."
)


def warn_few_clusters(names: Sequence[str], sizes: Sequence[int], remedies: bool = True) -> None:
    """Warn when a clustering variable has fewer than :data:`FEW_CLUSTERS` clusters.

    Examples
    --------
    >>> import warnings
    >>> with warnings.catch_warnings(record=True) as seen:
    ...     warnings.simplefilter("always")
    ...     warn_few_clusters(["site"], [12])
    >>> str(seen[0].message).split(".")[0]
    'few clusters: site (12)'
    """
    few = [f"{nm} ({g})" for nm, g in zip(names, sizes, strict=True) if g < FEW_CLUSTERS]
    if few:
        for seen in getattr(_RECORDERS, "stack", ()):
            seen.append((tuple(names), tuple(sizes), remedies))
        warnings.warn(
            f"few clusters: {', '.join(few)}. Cluster-robust tests lean on many clusters;"
            f" with fewer than {FEW_CLUSTERS} their size can be far from nominal. Read the"
            " p-values with care, or use a coarser model of the dependence."
            + (REMEDIES if remedies else ""),
            FewClustersWarning,
            stacklevel=_user_stacklevel(),
        )


_RECORDERS = threading.local()


@contextlib.contextmanager
def recorded_warnings() -> Iterator[list[tuple[Any, ...]]]:
    """Collect the arguments of every few-clusters warning drawn in this thread inside the
    block (the warnings are drawn as usual), so that a remembered estimate can draw them again
    (see :mod:`lincomb._covariance.cache`).

    Examples
    --------
    >>> import warnings
    >>> with warnings.catch_warnings():
    ...     warnings.simplefilter("ignore")
    ...     with recorded_warnings() as drawn:
    ...         warn_few_clusters(["site"], [12])
    >>> drawn
    [(('site',), (12,), True)]
    """
    stack = getattr(_RECORDERS, "stack", None)
    if stack is None:
        stack = _RECORDERS.stack = []
    seen: list[tuple[Any, ...]] = []
    stack.append(seen)
    try:
        yield seen
    finally:
        stack.pop()  # blocks nest within a thread: the last one is this one


def _user_stacklevel() -> int:
    """Stack level of the first frame outside this package (for warnings that point at the
    caller's line whichever public method led here)."""
    here = os.path.dirname(os.path.dirname(os.path.abspath(__file__)))  # the lincomb package
    current = inspect.currentframe()
    frame = current.f_back if current is not None else None  # the caller's frame: level 1
    level = 1
    while frame is not None and os.path.abspath(frame.f_code.co_filename).startswith(here):
        frame = frame.f_back
        level += 1
    return level
