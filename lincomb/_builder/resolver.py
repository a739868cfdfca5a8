"""The resolver a fit hands to restriction items: its coefficient index and formula encoder.

A fit builds its resolver once (:attr:`LinearFit.resolver <lincomb.LinearFit.resolver>`) and
every test on the fit reuses it: each name, term and level is looked up in the coefficient
index once, then read from a dictionary.  Failed look-ups are not remembered, so a wrong name
raises the index's own error every time.
"""

from __future__ import annotations

from typing import TYPE_CHECKING, Any

if TYPE_CHECKING:  # pragma: no cover
    from lincomb._fit.linear import LinearFit

__all__ = ["ModelResolver"]


# ---------------------------------------------------------------------------------------------
# the resolver a fit hands to restriction items
# ---------------------------------------------------------------------------------------------
class ModelResolver:
    """A fit's coefficient index plus its formula encoder, as seen by restriction items.

    It has the methods of :class:`lincomb.restriction.Resolver` (delegated to the index) and an
    ``encoder`` attribute (the fit's :class:`~lincomb._model.encoder.FormulaEncoder`, ``None``
    for fits made from arrays) that :class:`LevelContrasts` uses to evaluate the model at chosen
    levels.

    Examples
    --------
    >>> import lincomb as lc
    >>> f = lc.fit("fill_g ~ line", lc.datasets.fill_lines())
    >>> r = ModelResolver.of(f)
    >>> r.column("line[T.L3]"), r.encoder is not None
    (2, True)
    """

    def __init__(self, index: Any, encoder: Any = None) -> None:
        self.index = index
        self.names: tuple[str, ...] = tuple(index.names)
        self.encoder = encoder
        # look-ups that succeeded, so a fit's later tests skip the index's search
        self._columns: dict[str, int] = {}
        self._terms: dict[str, tuple[int, ...]] = {}
        self._levels: dict[tuple[str, tuple[str, ...]], int] = {}

    @classmethod
    def of(cls, fit: LinearFit) -> ModelResolver:
        """The resolver of a fit (works for fits made from arrays too).

        Examples
        --------
        >>> import lincomb as lc
        >>> f = lc.fit("fill_g ~ line + shift", lc.datasets.fill_lines())
        >>> ModelResolver.of(f).names[:2]
        ('Intercept', 'line[T.L2]')
        """
        design = fit.design
        return cls(design.index, design.encoder)

    def column(self, name: str) -> int:
        """Position of the coefficient called ``name``.

        Examples
        --------
        >>> import lincomb as lc
        >>> f = lc.fit("fill_g ~ line + shift", lc.datasets.fill_lines())
        >>> ModelResolver.of(f).column("shift[T.night]")
        5
        """
        try:
            return self._columns[name]
        except KeyError:
            j = self._columns[name] = int(self.index.column(name))
            return j

    def term_columns(self, term: str) -> tuple[int, ...]:
        """Positions of every coefficient of a model term.

        Examples
        --------
        >>> import lincomb as lc
        >>> f = lc.fit("fill_g ~ line + shift", lc.datasets.fill_lines())
        >>> ModelResolver.of(f).term_columns("line")
        (1, 2, 3)
        """
        try:
            return self._terms[term]
        except KeyError:
            cols = self._terms[term] = tuple(self.index.term_columns(term))
            return cols

    def level_column(self, term: str, key: tuple[str, ...]) -> int:
        """Position of the coefficient of ``term`` at the level(s) ``key``.

        Examples
        --------
        >>> import lincomb as lc
        >>> f = lc.fit("fill_g ~ line + shift", lc.datasets.fill_lines())
        >>> ModelResolver.of(f).level_column("line", ("L3",))
        2
        """
        try:
            return self._levels[term, key]
        except KeyError:
            j = self._levels[term, key] = int(self.index.level_column(term, key))
            return j
