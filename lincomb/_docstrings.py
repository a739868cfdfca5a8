"""Docstring text written once and filled into every docstring that shares it.

A docstring names a shared fragment on a line of its own as ``%(name)s``; :func:`fill_doc`
replaces that line with the fragment, indented as the placeholder was, when the module is
imported.  ``help()``, Sphinx (numpydoc) and doctest all read the filled ``__doc__``, so each
docstring still shows the whole text, while the source holds a shared parameter description,
section or example set-up once.  Only whole lines are placeholders: a ``%`` anywhere else in a
docstring is left alone.

Fragments shared by modules of different layers live here (the figure a drawing returns,
the fit most examples start from);
a fragment used in one module is defined in that module.  This module imports nothing of
lincomb but its errors, so the numerical core may use it too (``tests/test_layers.py``).
"""

from __future__ import annotations

import re
import sys
import textwrap
from collections.abc import Callable, Mapping
from typing import TypeVar

from lincomb.errors import InternalError

__all__ = [
    "fill_doc",
    "fill_text",
    "AX_PARAMETER",
    "FIGURE_RETURNS",
    "FILL_LINES_FIT",
    "fill_lines_doc",
    "RANK_TOL_PARAMETER",
]

_T = TypeVar("_T")

_PLACEHOLDER = re.compile(r"^([ \t]*)%\((\w+)\)s[ \t]*$", re.MULTILINE)

#: The ``ax`` parameter of everything that draws (numpydoc entry).
AX_PARAMETER = """\
ax : matplotlib Axes, optional
    Draw here instead of in a new figure (one that pyplot does not track); the axes' figure
    is returned."""

#: What everything that draws returns, and the error it raises without matplotlib (numpydoc
#: sections; a drawing with more errors lists them after this).
FIGURE_RETURNS = """\
Returns
-------
matplotlib.figure.Figure

Raises
------
OptionalDependencyError
    matplotlib is not installed."""

#: Example set-up: ``f``, a fit of fill weight on the filling line (the bundled filling-lines
#: data; coefficients ``Intercept, line[T.L2], line[T.L3], line[T.L4]``).
FILL_LINES_FIT = """\
>>> import lincomb as lc
>>> f = lc.fit("fill_g ~ line", lc.datasets.fill_lines())"""


#: The ``rank_tol`` parameter of everything that fits or plans a design (numpydoc entry).
RANK_TOL_PARAMETER = """\
rank_tol : float, default 1e-10
    Relative rank tolerance (see :mod:`lincomb._core`)."""


def fill_text(doc: str, fragments: Mapping[str, str]) -> str:
    """Replace each ``%(name)s`` line of ``doc`` by ``fragments[name]``, at that line's indent.

    Every fragment must be used and every placeholder must have a fragment, so a misspelt
    name fails at import instead of leaving a hole in the documentation.

    Raises
    ------
    InternalError
        A placeholder has no fragment, or a fragment has no placeholder.

    Examples
    --------
    >>> doc = "Sum.\\n\\n    Parameters\\n    ----------\\n    %(xy)s\\n"
    >>> print(fill_text(doc, {"xy": "x, y : float\\n    Terms."}))
    Sum.
    <BLANKLINE>
        Parameters
        ----------
        x, y : float
            Terms.
    <BLANKLINE>
    """
    used: set[str] = set()

    def fill(match: re.Match[str]) -> str:
        indent, name = match.group(1), match.group(2)
        if name not in fragments:
            raise InternalError(f"docstring placeholder %({name})s has no fragment")
        used.add(name)
        return textwrap.indent(textwrap.dedent(fragments[name]).strip("\n"), indent)

    out = _PLACEHOLDER.sub(fill, doc)
    unused = sorted(set(fragments) - used)
    if unused:
        raise InternalError(f"docstring fragments {unused} have no placeholder")
    return out


def fill_doc(**fragments: str) -> Callable[[_T], _T]:
    """Decorator: fill the ``%(name)s`` lines of a function's or class's docstring.

    The object is returned itself, with its ``__doc__`` filled (see :func:`fill_text`).  Under
    ``python -OO`` (docstrings stripped; a dataclass then writes a signature of its own as
    ``__doc__``) and for an object without a docstring, it is returned unchanged.

    Examples
    --------
    >>> @fill_doc(note="Notes\\n-----\\nShared text.")
    ... def f():
    ...     '''Do nothing.
    ...
    ...     %(note)s
    ...     '''
    >>> print(f.__doc__.strip())
    Do nothing.
    <BLANKLINE>
        Notes
        -----
        Shared text.
    """

    def fill(obj: _T) -> _T:
        doc = obj.__doc__
        if doc is not None and sys.flags.optimize < 2:
            obj.__doc__ = fill_text(doc, fragments)
        return obj

    return fill


#: Decorator: fill :data:`FILL_LINES_FIT` into a docstring's ``%(fill_lines_fit)s`` line.
fill_lines_doc = fill_doc(fill_lines_fit=FILL_LINES_FIT)
