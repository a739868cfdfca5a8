"""A small, immutable builder for linear restrictions ``C·β = d`` written in coefficient names.

Nothing here touches data or linear algebra.  Expressions hold *references* (a coefficient name,
or a level of a term) with weights; they are resolved into a numeric ``C`` and ``d`` only when a
fit asks, through any object with the :class:`Resolver` methods (the design's coefficient
index).

>>> from lincomb import coef, term
>>> r = (coef("x1") - 2 * coef("x2") == 1) & (term("C(site)") == 0)
>>> r
<RestrictionSystem: x1 - 2*x2 = 1 & C(site) = 0>

Every operator returns a new object.  Because ``==`` builds a restriction, ``bool()`` of one
raises ``TypeError`` (write ``&`` to combine, not ``and``), and expressions are unhashable.
"""

from __future__ import annotations

import math
import numbers
import struct
from array import array
from collections.abc import Iterable, Iterator, Mapping, Sequence
from dataclasses import dataclass
from itertools import chain
from operator import attrgetter
from types import NotImplementedType
from typing import Any, NamedTuple, Protocol, TypeGuard, cast

import numpy as np
import pandas as pd
from numpy.typing import ArrayLike, NDArray

from lincomb._builder.resolved import Resolved, RowLabels, RowLayout
from lincomb.errors import (
    EmptyRestrictionError,
    RestrictionShapeError,
    RestrictionSyntaxError,
    ZeroDivisorError,
)

__all__ = [
    "coef",
    "term",
    "from_matrix",
    "Expr",
    "Restriction",
    "RestrictionSystem",
    "TermRef",
    "Resolver",
    "as_system",
]


class Resolver(Protocol):
    """What the builder needs from a fit to turn names into column positions.

    A fit's coefficient index (``fit.index``) is one; anything with these methods will do.

    Examples
    --------
    >>> import lincomb as lc
    >>> index = lc.fit("fill_g ~ line", lc.datasets.fill_lines()).index
    >>> index.names
    ('Intercept', 'line[T.L2]', 'line[T.L3]', 'line[T.L4]')
    >>> (lc.term("line") == 0).resolve(index)[0].shape
    (3, 4)
    """

    names: tuple[str, ...]

    def column(self, name: str) -> int:
        """Position of the coefficient called ``name``.

        Examples
        --------
        >>> import lincomb as lc
        >>> lc.fit("fill_g ~ line", lc.datasets.fill_lines()).index.column("line[T.L3]")
        2
        """
        ...

    def term_columns(self, term: str) -> tuple[int, ...]:
        """Positions of every coefficient of a model term.

        Examples
        --------
        >>> import lincomb as lc
        >>> lc.fit("fill_g ~ line", lc.datasets.fill_lines()).index.term_columns("line")
        (1, 2, 3)
        """
        ...

    def level_column(self, term: str, key: tuple[str, ...]) -> int:
        """Position of the coefficient of ``term`` at the factor level(s) ``key``.

        Examples
        --------
        >>> import lincomb as lc
        >>> lc.fit("fill_g ~ line", lc.datasets.fill_lines()).index.level_column("line", ("L4",))
        3
        """
        ...


# References: a coefficient is its name, a plain string; a level of a term is a named tuple.
# An expression keys its weights by them, and a batch of systems looks up thousands of them:
# a string's hash is cached, and a tuple's hash and equality run in C
class _Level(NamedTuple):
    term: str
    key: tuple[str, ...]

    def label(self) -> str:
        inner = ", ".join(self.key)
        return f"{self.term}[{inner}]"

    def resolve(self, index: Resolver) -> int:
        return index.level_column(self.term, self.key)


_Ref = str | _Level

# readers of this module's private fields, for the functions outside the classes and the
# C-level passes of :func:`lincomb._builder.stack.stack_systems`
_expr_terms = attrgetter("_terms")
_terms_of = attrgetter("_expr._terms")
_flat_of = attrgetter("_flat")


def _ref_label(ref: _Ref) -> str:
    return ref if isinstance(ref, str) else ref.label()


def _ref_column(ref: _Ref, index: Resolver) -> int:
    """Position of the coefficient ``ref`` names, through the resolver's look-ups."""
    return index.column(ref) if isinstance(ref, str) else ref.resolve(index)


# Rows of plain restrictions in the form a batch reads without touching each restriction,
# made when the restriction or system is built: (the references of every row, in order; their
# weights as float64 bytes; per row, its number of references and its target as two float64
# bytes).  A system of k plain rows concatenates its rows' parts; a batch joins the systems'
# bytes into arrays (numpy.frombuffer) and chains their references.  Bytes and tuples are
# immutable, and packing a float64 is exact.
_Flat = tuple[tuple[_Ref, ...], bytes, bytes]
_pack_row = struct.Struct("dd").pack
_pack_weights = tuple(struct.Struct(f"{n}d").pack for n in range(16))  # by number of weights
#: bytes per row in the third part of a :data:`_Flat`
_ROW_BYTES = struct.calcsize("dd")

_BOOL_MSG = (
    "a restriction has no truth value: combine restrictions with '&' (not 'and'), and test"
    " them with a fit, e.g. fit.wald(r1 & r2)."
)


def _is_number(v: object) -> TypeGuard[float]:
    """A real number (numpy scalars included), not a bool; typed as ``float`` for ``float(v)``."""
    if type(v) is float or type(v) is int:  # the usual case, without the ABC check
        return True
    return isinstance(v, numbers.Real) and not isinstance(v, bool)


def _fmt_num(v: float) -> str:
    return f"{v:.12g}"


class _EqualitiesOnly:
    """``==`` builds restrictions; ``!=``, orderings and truth values raise and say what to write.

    Shared by :class:`Expr` and :class:`TermRef`.
    """

    __slots__ = ()

    def __ne__(self, other: object) -> bool:
        raise RestrictionSyntaxError("'!=' builds nothing: a restriction is written with '=='.")

    def __bool__(self) -> bool:
        raise RestrictionSyntaxError(_BOOL_MSG)

    def __lt__(self, other: object) -> bool:
        raise _no_order("<")

    def __le__(self, other: object) -> bool:
        raise _no_order("<=")

    def __gt__(self, other: object) -> bool:
        raise _no_order(">")

    def __ge__(self, other: object) -> bool:
        raise _no_order(">=")


def _no_order(op: str) -> RestrictionSyntaxError:
    return RestrictionSyntaxError(
        f"'{op}' builds nothing: restrictions are equalities written with '==' "
        "(a one-sided question is read from a row's estimate and interval)."
    )


class Expr(_EqualitiesOnly):
    """A linear expression ``Σ wᵢ·βᵢ + k`` in named coefficients.

    Build one with :func:`coef` or by indexing a :func:`term`; combine with ``+``, ``-``,
    unary ``-``, and ``*`` or ``/`` by a number.  Comparing with ``==`` gives a
    :class:`Restriction`.

    Examples
    --------
    >>> from lincomb import coef
    >>> e = 0.5 * (coef("a") + coef("b")) - coef("c")
    >>> e
    <Expr: 0.5*a + 0.5*b - c>
    >>> e == 2
    <Restriction: 0.5*a + 0.5*b - c = 2>
    """

    __slots__ = ("_terms", "_const")
    __hash__ = None  # type: ignore[assignment]

    def __init__(self, terms: dict[_Ref, float] | None = None, const: float = 0.0) -> None:
        self._terms: dict[_Ref, float] = {k: float(v) for k, v in (terms or {}).items() if v != 0}
        self._const = float(const)

    @staticmethod
    def _made(terms: dict[_Ref, float], const: float) -> Expr:
        """An expression over ``terms`` as they are: non-zero floats in a dict that nothing
        changes (expressions never change their dict, so they may share one)."""
        e: Expr = Expr.__new__(Expr)
        e._terms = terms
        e._const = const
        return e

    # -- arithmetic ---------------------------------------------------------------------
    def _combine(self, other: object, sign: float) -> Expr | NotImplementedType:
        if isinstance(other, Expr):
            rhs: Expr = other
            terms = dict(self._terms)
            get = terms.get
            for k, v in rhs._terms.items():
                terms[k] = get(k, 0.0) + sign * v
            if 0.0 in terms.values():  # a weight cancelled: left out, as __init__ does
                terms = {k: v for k, v in terms.items() if v != 0}
            return Expr._made(terms, self._const + sign * rhs._const)
        if _is_number(other):
            if not math.isfinite(float(other)):
                raise RestrictionShapeError(f"constant {other!r} is not finite.")
            return Expr._made(self._terms, self._const + sign * float(other))
        return NotImplemented  # type: ignore[no-any-return]  # typeshed types it as Any

    def __add__(self, other: object) -> Expr:
        return self._combine(other, 1.0)

    def __radd__(self, other: object) -> Expr:
        return self._combine(other, 1.0)

    def __sub__(self, other: object) -> Expr:
        return self._combine(other, -1.0)

    def __rsub__(self, other: object) -> Expr:
        return (-self)._combine(other, 1.0)

    def __neg__(self) -> Expr:
        return Expr({k: -v for k, v in self._terms.items()}, -self._const)

    def __pos__(self) -> Expr:
        return self

    def __mul__(self, other: object) -> Expr:
        if isinstance(other, Expr):
            raise RestrictionSyntaxError(
                "a product of two coefficients is not linear; multiply by numbers only."
            )
        if not _is_number(other):
            return NotImplemented
        f = float(other)
        if not math.isfinite(f):
            raise RestrictionShapeError(f"multiplier {other!r} is not finite.")
        return Expr({k: v * f for k, v in self._terms.items()}, self._const * f)

    __rmul__ = __mul__

    def __truediv__(self, other: object) -> Expr:
        if not _is_number(other):
            if isinstance(other, Expr):
                raise RestrictionSyntaxError(
                    "dividing by a coefficient is not linear; divide by numbers only."
                )
            return NotImplemented
        if float(other) == 0:
            raise ZeroDivisorError(
                f"{self.text()} divided by zero: divide an expression by a non-zero number."
            )
        return self * (1.0 / float(other))

    # -- comparison ---------------------------------------------------------------------
    def __eq__(self, other: object) -> Restriction:  # type: ignore[override]
        if isinstance(other, Expr):
            diff = self - other
        elif _is_number(other):
            diff = self - other
        else:
            return NotImplemented
        return Restriction(Expr._made(diff._terms, 0.0), 0.0 - diff._const if diff._const else 0.0)

    # -- presentation -------------------------------------------------------------------
    def text(self) -> str:
        """The expression as algebra in coefficient names.

        Examples
        --------
        >>> from lincomb import coef
        >>> (2 * coef("a") - coef("b") / 4 + 1).text()
        '2*a - 0.25*b + 1'
        """
        parts: list[str] = []
        for ref, w in self._terms.items():
            mag = abs(w)
            name = _ref_label(ref)
            body = name if mag == 1 else f"{_fmt_num(mag)}*{name}"
            if not parts:
                parts.append(body if w > 0 else f"-{body}")
            else:
                parts.append(f"{'+' if w > 0 else '-'} {body}")
        if self._const or not parts:
            c = self._const
            if not parts:
                parts.append(_fmt_num(c))
            else:
                parts.append(f"{'+' if c > 0 else '-'} {_fmt_num(abs(c))}")
        return " ".join(parts)

    def __repr__(self) -> str:
        return f"<Expr: {self.text()}>"

    def row(self, index: Resolver) -> NDArray[np.float64]:
        """The expression's weights on a fit's coefficients (its constant left out).

        Examples
        --------
        >>> import lincomb as lc
        >>> index = lc.fit("fill_g ~ line", lc.datasets.fill_lines()).index
        >>> (2 * lc.coef("line[T.L2]") - lc.coef("line[T.L4]") + 1).row(index).tolist()
        [0.0, 2.0, 0.0, -1.0]
        """
        row = np.zeros(len(index.names))
        for ref, w in self._terms.items():
            row[_ref_column(ref, index)] += w
        return row


def coef(name: str) -> Expr:
    """Refer to one coefficient by its column name.

    Parameters
    ----------
    name : str
        A column name of the fit, e.g. ``"rainfall_mm"`` or ``"C(variety)[T.Brora]"``.  It is
        checked only when a fit resolves the restriction.

    Examples
    --------
    >>> from lincomb import coef
    >>> coef("price") == 1
    <Restriction: price = 1>
    """
    if not isinstance(name, str) or not name:
        raise RestrictionSyntaxError(f"coef() needs a non-empty column name, got {name!r}.")
    return Expr({name: 1.0})


@dataclass(frozen=True, eq=False)
class TermRef(_EqualitiesOnly):
    """All the columns of one model term (a factor, an interaction or a numeric variable).

    Index it by level to get one coefficient; compare it with a number to restrict every one of
    its coefficients at once, or with one number per column (a sequence in column order, or a
    mapping / Series from coefficient name to value) to give each its own target.

    Examples
    --------
    >>> from lincomb import term
    >>> t = term("C(dose)")
    >>> t["40"] - t["10"] == 0
    <Restriction: C(dose)[40] - C(dose)[10] = 0>
    >>> t == 0
    <RestrictionSystem: C(dose) = 0>
    >>> t == [0.5, 1.0, 2.0]
    <RestrictionSystem: C(dose) = [0.5, 1, 2]>
    """

    name: str

    __hash__ = None  # type: ignore[assignment]

    def __getitem__(self, key: object) -> Expr:
        keys = tuple(key) if isinstance(key, tuple) else (key,)
        return Expr({_Level(self.name, tuple(map(str, keys))): 1.0})

    def __eq__(self, other: object) -> RestrictionSystem:  # type: ignore[override]
        if _is_number(other):
            return RestrictionSystem((_TermRows(self.name, float(other)),))
        if isinstance(other, (Mapping, pd.Series)):
            items = tuple((str(k), _target_number(v, self.name)) for k, v in other.items())
            return RestrictionSystem((_TermRows(self.name, items),))
        if isinstance(other, (list, tuple, np.ndarray)):
            flat = np.asarray(other, dtype=object).reshape(-1)
            values = tuple(_target_number(v, self.name) for v in flat)
            return RestrictionSystem((_TermRows(self.name, values),))
        return NotImplemented

    def __repr__(self) -> str:
        return f"<TermRef: {self.name}>"


def term(name: str) -> TermRef:
    """Refer to a model term by its formula label, e.g. ``"C(dose)"`` or ``"C(a):x"``.

    Examples
    --------
    >>> from lincomb import term
    >>> term("C(line)")["L3"] == 0
    <Restriction: C(line)[L3] = 0>
    """
    if not isinstance(name, str) or not name:
        raise RestrictionSyntaxError(f"term() needs a non-empty term label, got {name!r}.")
    return TermRef(name)


class _Item:
    """One building block of a system: resolves into one or more rows."""

    #: the rows as batches read them (see ``_Flat``); only a plain restriction has them
    _flat: _Flat | None = None

    def rows(self, index: Resolver) -> Iterator[tuple[NDArray[np.float64], float, str]]:
        raise NotImplementedError

    def row_labels(self, index: Resolver) -> list[str]:
        """The labels of the rows :meth:`rows` yields (without building the rows, where it can)."""
        return [label for _row, _d, label in self.rows(index)]

    def text(self) -> str:
        raise NotImplementedError

    def shown(self) -> str:
        """How reprs show the block: its algebra, or ``label (algebra)`` when it has a label."""
        return self.text()


class Restriction(_Item):
    """One linear restriction ``c·β = d``.

    Combine restrictions into a system with ``&``.

    Examples
    --------
    >>> from lincomb import coef
    >>> r = coef("a") == coef("b")
    >>> r
    <Restriction: a - b = 0>
    >>> (r & (coef("c") == 1)).text()
    'a - b = 0 & c = 1'
    >>> r.labelled("equal effects")
    <Restriction: equal effects (a - b = 0)>
    """

    __slots__ = ("_expr", "_target", "_label", "_flat")
    __hash__ = None  # type: ignore[assignment]

    def __init__(self, expr: Expr, target: float, label: str | None = None) -> None:
        if not isinstance(expr, Expr):
            raise RestrictionSyntaxError(
                f"a restriction is built from an expression, e.g. coef('x') == 0; got {expr!r}."
            )
        terms = _expr_terms(expr)
        self._expr = expr
        self._target = target = float(target)
        self._label = label
        # the row in the form batches read (see _Flat), made once here: the fields are
        # read-only, so it cannot go stale.  A subclass gives its rows through rows()
        n = len(terms)
        self._flat: _Flat | None = (
            (
                tuple(terms),
                _pack_weights[n](*terms.values())
                if n < len(_pack_weights)
                else array("d", terms.values()).tobytes(),
                _pack_row(n, target),
            )
            if type(self) is Restriction
            else None
        )

    @property
    def expr(self) -> Expr:
        """The left-hand side: the weights on the coefficients (read-only)."""
        return self._expr

    @property
    def target(self) -> float:
        """The right-hand side ``d`` (read-only)."""
        return self._target

    @property
    def label(self) -> str | None:
        """The user's label for the row, or None (read-only; see :meth:`labelled`)."""
        return self._label

    def labelled(self, label: str) -> Restriction:
        """A copy of the restriction that results call ``label`` instead of its algebra.

        The label becomes the row's name in ``labels``, in ``row_frame()["restriction"]``, in
        the reprs, in the report tables and in plots; :meth:`text` keeps the algebra.

        Parameters
        ----------
        label : str
            A non-empty name for the row.

        Examples
        --------
        >>> import lincomb as lc
        >>> f = lc.fit("fill_g ~ line", lc.datasets.fill_lines())
        >>> r = (lc.coef("line[T.L2]") == lc.coef("line[T.L3]")).labelled("L2 = L3")
        >>> f.wald(r).labels
        ('L2 = L3',)
        """
        if not isinstance(label, str) or not label.strip():
            raise RestrictionSyntaxError(
                f"labelled() needs a non-empty string, got {label!r}; e.g. 'equal effects'."
            )
        return Restriction(self._expr, self._target, label)

    def text(self) -> str:
        """The restriction as an equation in coefficient names.

        Examples
        --------
        >>> from lincomb import coef
        >>> (coef("a") + 1 == coef("b")).text()
        'a - b = -1'
        """
        return f"{self._expr.text()} = {_fmt_num(self._target)}"

    def shown(self) -> str:
        """The label and the algebra (``label (a - b = 0)``), or the algebra alone.

        Examples
        --------
        >>> from lincomb import coef
        >>> (coef("a") == 1).labelled("a at one").shown()
        'a at one (a = 1)'
        """
        return self.text() if self._label is None else f"{self._label} ({self.text()})"

    def __repr__(self) -> str:
        return f"<Restriction: {self.shown()}>"

    def __bool__(self) -> bool:
        raise RestrictionSyntaxError(_BOOL_MSG)

    def __and__(self, other: object) -> RestrictionSystem:
        if type(other) is Restriction:  # the usual case, without the intermediate systems
            return RestrictionSystem((self, other))
        return as_system(self) & other

    def __rand__(self, other: object) -> RestrictionSystem:
        return as_system(other) & self

    def row_labels(self, index: Resolver) -> list[str]:  # noqa: ARG002 - names need no fit
        """The restriction's one row label: its label, or its algebra.

        Examples
        --------
        >>> from lincomb import coef
        >>> r = coef("a") == coef("b")
        >>> r.row_labels(None), r.labelled("equal").row_labels(None)
        (['a - b = 0'], ['equal'])
        """
        return [self.text() if self._label is None else self._label]

    def rows(self, index: Resolver) -> Iterator[tuple[NDArray[np.float64], float, str]]:
        """Yield the restriction's one ``(row of C, d, label)`` on the columns of ``index``.

        Examples
        --------
        >>> import lincomb as lc
        >>> index = lc.fit("fill_g ~ line", lc.datasets.fill_lines()).index
        >>> [(c.tolist(), d, label) for c, d, label in (lc.coef("line[T.L2]") == 1).rows(index)]
        [([0.0, 1.0, 0.0, 0.0], 1.0, 'line[T.L2] = 1')]
        """
        row = self._expr.row(index)
        if not np.count_nonzero(row):
            raise _cancelled(self)
        yield row, self._target, self.text() if self._label is None else self._label


def _cancelled(r: Restriction) -> EmptyRestrictionError:
    return EmptyRestrictionError(
        f"restriction '{r.text()}' has no coefficients left (its weights cancel);"
        " remove it or fix its terms."
    )


def _target_number(v: object, name: str) -> float:
    if not _is_number(v) or not np.isfinite(float(v)):
        raise RestrictionShapeError(
            f"the targets of term {name!r} must be finite numbers, got {v!r}."
        )
    return float(v)


@dataclass(frozen=True)
class _TermRows(_Item):
    """Every column of a term equal to one target, or each to its own.

    ``value`` is one number, a tuple of numbers (one per column, in column order) or a tuple
    of ``(coefficient name, number)`` pairs.
    """

    name: str
    value: float | tuple[float, ...] | tuple[tuple[str, float], ...]

    def text(self) -> str:
        v = self.value
        if isinstance(v, tuple):
            shown = [
                _fmt_num(x) if not isinstance(x, tuple) else f"{x[0]}: {_fmt_num(x[1])}" for x in v
            ]
            return f"{self.name} = [{', '.join(shown)}]"
        return f"{self.name} = {_fmt_num(v)}"

    def _targets(self, names: Sequence[str]) -> list[float]:
        v = self.value
        if not isinstance(v, tuple):
            return [v] * len(names)
        if v and isinstance(v[0], tuple):
            given = dict(v)
            unknown = sorted(set(given) - set(names))
            lacking = [n for n in names if n not in given]
            if unknown or lacking:
                raise RestrictionShapeError(
                    f"the targets of term {self.name!r} name its columns {list(names)};"
                    f" unknown: {unknown}, without a target: {lacking}."
                )
            return [float(given[n]) for n in names]
        if len(v) != len(names):
            raise RestrictionShapeError(
                f"term {self.name!r} has {len(names)} columns {list(names)} but {len(v)}"
                " targets were given; give one per column (in that order), or a mapping from"
                " coefficient name to target."
            )
        return [float(x) for x in v]  # type: ignore[arg-type]

    def rows(self, index: Resolver) -> Iterator[tuple[NDArray[np.float64], float, str]]:
        cols = index.term_columns(self.name)
        if not cols:
            raise EmptyRestrictionError(
                f"term {self.name!r} has no columns in this fit, so it has nothing to test: a"
                " factor with a single level in the data (or a term the formula absorbed into"
                " others) adds no coefficient. Leave it out of the restriction (and the formula)."
            )
        targets = self._targets([index.names[j] for j in cols])
        for j, target in zip(cols, targets, strict=True):
            row = np.zeros(len(index.names))
            row[j] = 1.0
            yield row, target, f"{index.names[j]} = {_fmt_num(target)}"


class _MatrixRows(_Item):
    def __init__(self, c: Any, d: Any, labels: Sequence[str] | None) -> None:
        self.c = c
        self.d = d
        self.labels = labels

    def text(self) -> str:
        m = self.c.shape[0]
        return f"[{m} explicit row{'s' if m != 1 else ''}]"

    def rows(self, index: Resolver) -> Iterator[tuple[NDArray[np.float64], float, str]]:
        p = len(index.names)
        if isinstance(self.c, pd.DataFrame):
            mat = np.zeros((self.c.shape[0], p))
            for col in self.c.columns:
                j = index.column(str(col))
                mat[:, j] += self.c[col].to_numpy(dtype=np.float64)
        else:
            mat = self.c
            if mat.shape[1] != p:
                raise RestrictionShapeError(
                    f"C has {mat.shape[1]} columns but the fit has {p} coefficients"
                    f" {list(index.names)}; give one column per coefficient, or a DataFrame"
                    " whose columns are coefficient names."
                )
        for i in range(mat.shape[0]):
            row = mat[i]
            if self.labels is not None:
                label = str(self.labels[i])
            else:
                e = Expr({index.names[j]: row[j] for j in np.flatnonzero(row)})
                label = f"{e.text()} = {_fmt_num(self.d[i])}"
            if not row.any():
                raise EmptyRestrictionError(f"row {i} of C ({label!r}) is all zeros; drop it.")
            yield row.copy(), float(self.d[i]), label


class RestrictionSystem:
    """An ordered system of restrictions ``C·β = d``, built with ``&``.

    Examples
    --------
    >>> from lincomb import coef, term
    >>> s = (coef("a") == 0) & (coef("b") - coef("c") == 2.5)
    >>> len(s.items), s.text()
    (2, 'a = 0 & b - c = 2.5')
    """

    __slots__ = ("_items", "_flat")
    __hash__ = None  # type: ignore[assignment]

    def __init__(self, items: Iterable[_Item]) -> None:
        self._items: tuple[_Item, ...] = tuple(items)
        self._flat: _Flat | None = _flat_rows(self._items)

    @property
    def items(self) -> tuple[_Item, ...]:
        """The restrictions and other blocks of the system, in order (read-only)."""
        return self._items

    def _joined(self, items: tuple[_Item, ...], flat: _Flat | None) -> RestrictionSystem:
        """``self & (items)``, given the flat rows of ``items``: both concatenated."""
        new: RestrictionSystem = RestrictionSystem.__new__(RestrictionSystem)
        new._items = self._items + items
        a = self._flat
        new._flat = None if a is None or flat is None else _concat(a, flat)
        return new

    def __and__(self, other: object) -> RestrictionSystem:
        if type(other) is Restriction:  # the usual case, without an intermediate system
            return self._joined((other,), _flat_of(other))
        if isinstance(other, (RestrictionSystem, _Item)):
            rhs = as_system(other)
            return self._joined(rhs._items, rhs._flat)
        if isinstance(other, (Expr, TermRef)):
            raise RestrictionSyntaxError(
                f"{other!r} is an expression, not a restriction: compare it with '==' first."
            )
        return NotImplemented

    def __rand__(self, other: object) -> RestrictionSystem:
        return as_system(other) & self

    def __bool__(self) -> bool:
        raise RestrictionSyntaxError(_BOOL_MSG)

    def text(self) -> str:
        """The system as equations joined by ``&``.

        Examples
        --------
        >>> from lincomb import coef, term
        >>> ((coef("a") == 0) & (term("C(g)") == 1)).text()
        'a = 0 & C(g) = 1'
        """
        return " & ".join(item.text() for item in self._items)

    def __repr__(self) -> str:
        return f"<RestrictionSystem: {' & '.join(item.shown() for item in self._items)}>"

    def resolve(
        self, index: Resolver
    ) -> tuple[NDArray[np.float64], NDArray[np.float64], list[str]]:
        """Turn the system into ``(C, d, row labels)`` for the coefficients of ``index``.

        Examples
        --------
        >>> import lincomb as lc
        >>> index = lc.fit("fill_g ~ line", lc.datasets.fill_lines()).index
        >>> c, d, labels = ((lc.term("line") == 0) & (lc.coef("Intercept") == 500)).resolve(index)
        >>> c.shape, d.tolist(), labels[-1]
        ((4, 4), [0.0, 0.0, 0.0, 500.0], 'Intercept = 500')
        """
        c, d, labels, _layout = self.resolved(index)
        return c, d, list(labels)

    def resolved(self, index: Resolver) -> Resolved:
        """:meth:`resolve` for the test routes: the labels are written when first read, and
        a system of plain restrictions says which columns its rows use.

        Examples
        --------
        >>> import lincomb as lc
        >>> index = lc.fit("fill_g ~ line", lc.datasets.fill_lines()).index
        >>> r = ((lc.coef("line[T.L2]") == 0) & (lc.coef("line[T.L3]") == 1)).resolved(index)
        >>> r.layout.touched, r.layout.apart, list(r.labels)
        (frozenset({1, 2}), True, ['line[T.L2] = 0', 'line[T.L3] = 1'])
        """
        items = self._items
        if items and all(type(item) is Restriction for item in items):
            return _resolve_restrictions(items, index)  # type: ignore[arg-type]
        c, d, labels = self._resolve_rows(index)
        return Resolved(c, d, labels, None)

    def _resolve_rows(
        self, index: Resolver
    ) -> tuple[NDArray[np.float64], NDArray[np.float64], list[str]]:
        """The general path of :meth:`resolve`: every item gives its rows."""
        items = self._items
        rows: list[NDArray[np.float64]] = []
        ds: list[float] = []
        labels: list[str] = []
        for item in items:
            for row, d, label in item.rows(index):
                rows.append(row)
                ds.append(d)
                labels.append(label)
        if not rows:
            raise EmptyRestrictionError("the restriction system has no rows; add a restriction.")
        return np.array(rows), np.array(ds), labels

    def row_labels(self, index: Resolver) -> list[str]:
        """The labels :meth:`resolve` gives the rows, without building ``C``.

        Examples
        --------
        >>> import lincomb as lc
        >>> index = lc.fit("fill_g ~ line", lc.datasets.fill_lines()).index
        >>> ((lc.term("line") == 0) & (lc.coef("Intercept") == 500)).row_labels(index)
        ['line[T.L2] = 0', 'line[T.L3] = 0', 'line[T.L4] = 0', 'Intercept = 500']
        """
        return [label for item in self._items for label in item.row_labels(index)]


def _flat_rows(items: tuple[_Item, ...]) -> _Flat | None:
    """The rows of ``items`` as one :data:`_Flat`, or None unless all are plain restrictions."""
    flats: list[_Flat | None] = list(map(_flat_of, items))
    if None in flats:
        return None
    plain = cast("list[_Flat]", flats)
    if len(plain) == 1:
        return plain[0]
    if len(plain) == 2:
        return _concat(*plain)
    if not plain:
        return ((), b"", b"")
    refs, weights, rows = zip(*plain, strict=True)
    return (tuple(chain.from_iterable(refs)), b"".join(weights), b"".join(rows))


def _concat(a: _Flat, b: _Flat) -> _Flat:
    return (a[0] + b[0], a[1] + b[1], a[2] + b[2])


def _resolve_restrictions(items: Sequence[Restriction], index: Resolver) -> Resolved:
    """:meth:`RestrictionSystem.resolved` for a system of plain restrictions (one row each).

    Each row's weights are summed per column in Python (in the order :meth:`Expr.row` adds
    them, from 0.0, so the sums are those of the general path to the bit) and checked in turn,
    so the values and the first error raised are those of the general path, without a row
    array, a generator and a stacking pass per restriction; ``C`` is filled by one ``put``.
    """
    p = len(index.names)
    positions: list[int] = []
    weights: list[float] = []
    touched: set[int] = set()
    apart = True
    for i, item in enumerate(items):
        row: dict[int, float] = {}
        for ref, w in _terms_of(item).items():
            j = _ref_column(ref, index)
            row[j] = row.get(j, 0.0) + w
        start = len(positions)
        for j, w in row.items():
            if w != 0:  # NaN (from an overflowed product) counts as nonzero, as in numpy
                if j in touched or not math.isfinite(w):
                    apart = False
                touched.add(j)
                positions.append(i * p + j)
                weights.append(w)
        if len(positions) == start:
            raise _cancelled(item)
    c = np.zeros((len(items), p))
    c.put(positions, weights)
    d = np.array([item.target for item in items])
    layout = RowLayout(frozenset(touched), apart, tuple(positions))
    return Resolved(c, d, RowLabels(items), layout)


def from_matrix(
    c: ArrayLike | pd.DataFrame,
    d: ArrayLike | None = None,
    labels: Sequence[str] | None = None,
) -> RestrictionSystem:
    """Build a system from an explicit ``C`` (and ``d``, zero by default).

    Parameters
    ----------
    c : (m, p) array_like or DataFrame
        With an array, one column per coefficient in fit order (checked at test time).  With a
        DataFrame, columns are coefficient names; coefficients not named get weight 0.
    d : (m,) array_like, optional
    labels : sequence of str, optional
        Row labels; default: the row written as algebra.

    Examples
    --------
    >>> import pandas as pd
    >>> from lincomb import from_matrix
    >>> from_matrix(pd.DataFrame({"a": [1.0, 0], "b": [-1.0, 1]}), d=[0, 2])
    <RestrictionSystem: [2 explicit rows]>
    """
    if isinstance(c, pd.DataFrame):
        text = [str(k) for k, t in c.dtypes.items() if not pd.api.types.is_numeric_dtype(t)]
        if text:
            raise RestrictionShapeError(
                f"C must be numeric, but its column(s) {text[:5]} hold"
                f" {c[c.columns[[str(k) in text for k in c.columns]][0]].dtype} values;"
                " convert them with pd.to_numeric first."
            )
        cm: Any = c.astype(np.float64)
        arr = cm.to_numpy()
        if labels is None and not isinstance(c.index, pd.RangeIndex):
            labels = [str(i) for i in c.index]
    else:
        raw = np.asarray(c)
        if raw.dtype.kind in "USO" and any(isinstance(v, str | bytes) for v in raw.flat):
            raise RestrictionShapeError("C must be numeric, but it holds text.")
        try:
            arr = np.array(c, dtype=np.float64, copy=True)
        except (TypeError, ValueError):
            raise RestrictionShapeError("C must be numeric.") from None
        if arr.ndim == 1:
            arr = arr[None, :]
        if arr.ndim != 2:
            raise RestrictionShapeError(f"C must be 2-dimensional, got shape {arr.shape}.")
        cm = arr
    m = arr.shape[0]
    if m == 0:
        raise EmptyRestrictionError("C has no rows; give at least one restriction.")
    bad = np.argwhere(~np.isfinite(arr))
    if bad.size:
        i, j = bad[0]
        raise RestrictionShapeError(
            f"C holds {float(arr[i, j])!r} at row {i}, column {j}; C must be finite."
        )
    if d is None:
        dv = np.zeros(m)
    else:
        try:
            dv = np.array(d, dtype=np.float64, copy=True).reshape(-1)
        except (TypeError, ValueError):
            raise RestrictionShapeError("d must be numeric.") from None
        if dv.size == 1 and m > 1 and np.ndim(d) == 0:
            dv = np.full(m, float(dv[0]))
        if dv.shape[0] != m:
            raise RestrictionShapeError(f"d has {dv.shape[0]} entries but C has {m} rows.")
        badd = np.flatnonzero(~np.isfinite(dv))
        if badd.size:
            raise RestrictionShapeError(
                f"d holds {float(dv[badd[0]])!r} at row {badd[0]}; d must be finite."
            )
    if labels is not None and len(labels) != m:
        raise RestrictionShapeError(f"{len(labels)} labels for {m} rows of C.")
    return RestrictionSystem((_MatrixRows(cm, dv, labels),))


def as_system(obj: object) -> RestrictionSystem:
    """Accept a restriction, a system, or a term comparison; return a system unchanged.

    Examples
    --------
    >>> from lincomb import coef
    >>> s = as_system(coef("a") == 0)
    >>> as_system(s) is s
    True
    """
    if isinstance(obj, RestrictionSystem):
        return obj
    if isinstance(obj, _Item):
        return RestrictionSystem((obj,))
    if isinstance(obj, (Expr, TermRef)):
        raise RestrictionSyntaxError(
            f"{obj!r} is an expression, not a restriction: compare it with '==', e.g. "
            "coef('x') == 0."
        )
    if isinstance(obj, (list, tuple)):
        out = RestrictionSystem(())
        for o in obj:
            out = out & as_system(o)
        return out
    raise RestrictionSyntaxError(
        f"expected a restriction built with coef()/term() and '==', got {type(obj).__name__}."
    )
