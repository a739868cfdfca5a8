"""Turning restrictions into ``(C, d, labels)``: one method for fits and planned designs.

A :class:`~lincomb.LinearFit`, an :class:`~lincomb.EstimatesFit` and a
:class:`~lincomb.PlannedDesign` resolve the same restrictions (``coef``, ``term``,
``from_matrix``, level-mean contrasts where a formula encoder is known) through their
``resolver``, a :class:`~lincomb._builder.resolver.ModelResolver` built once per object.
"""

from __future__ import annotations

from typing import TYPE_CHECKING

import numpy as np
from numpy.typing import NDArray

from lincomb._builder.resolved import Resolved
from lincomb._builder.restriction import RestrictionSystem, as_system
from lincomb._docstrings import fill_lines_doc

if TYPE_CHECKING:  # pragma: no cover
    from lincomb._builder.resolver import ModelResolver

__all__ = ["ResolvesRestrictions"]


class ResolvesRestrictions:
    """The ``resolve`` method of an object whose ``resolver`` names its coefficients."""

    if TYPE_CHECKING:  # pragma: no cover

        @property
        def resolver(self) -> ModelResolver: ...

    @fill_lines_doc
    def resolve(
        self, restrictions: object
    ) -> tuple[NDArray[np.float64], NDArray[np.float64], list[str]]:
        """Turn restrictions into ``(C, d, labels)`` on these coefficients.

        Examples
        --------
        %(fill_lines_fit)s
        >>> c, d, labels = f.resolve(lc.coef("line[T.L2]") == lc.coef("line[T.L3]"))
        >>> c.tolist(), d.tolist()
        ([[0.0, 1.0, -1.0, 0.0]], [0.0])
        >>> e = lc.from_estimates([1.0, 2.0], [[1.0, 0.0], [0.0, 4.0]], names=["a", "b"])
        >>> e.resolve(lc.coef("a") == lc.coef("b"))[0].tolist()
        [[1.0, -1.0]]
        >>> import pandas as pd
        >>> d = lc.planned_design("g", pd.DataFrame({"g": ["a", "b", "c"]}))
        >>> c, target, labels = d.resolve(lc.term("g") == 0)
        >>> c.tolist(), labels
        ([[0.0, 1.0, 0.0], [0.0, 0.0, 1.0]], ['g[T.b] = 0', 'g[T.c] = 0'])
        """
        c, d, labels, _layout = self._resolved(restrictions)
        return c, d, list(labels)

    def _resolved(self, restrictions: object) -> Resolved:
        """:meth:`resolve` for the test routes: labels written when first read, and the
        columns the rows of plain restrictions touch (:meth:`RestrictionSystem.resolved`)."""
        system: RestrictionSystem = as_system(restrictions)
        # the resolver also carries the formula encoder, for contrasts on level means
        return system.resolved(self.resolver)
