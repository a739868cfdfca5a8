"""Testing restrictions on estimates that come from any model.

:func:`from_estimates` takes a vector of estimates and their covariance (from a generalized
linear model, a mixed model, another package's fit, ...) and returns an :class:`EstimatesFit`:
an object that resolves the same restrictions a :class:`~lincomb.LinearFit` does (``coef``,
``term``, ``from_matrix``, and level-mean contrasts when the formula and data are given) and
gives the same :class:`~lincomb.WaldTest`.

Algebra.  With ``D = diag(sd)`` the standard deviations (``1`` where a variance is zero) the
scaled covariance ``D⁻¹ V D⁻¹ = U Λ Uᵀ`` is factored once (``eigh`` of the small ``k × k``
matrix; no inverse is formed).  Eigenvalues at most :data:`COVARIANCE_RANK_TOL` times the
largest count as zero; ``U_r`` spans the rest.  A row ``c`` is testable when ``c D⁻¹`` lies in
the span of ``U_r`` (relative residual at most :data:`lincomb._core.ROW_TOL`); the root of
``Cov(Cβ̂)`` is ``Λ_r^{1/2} U_rᵀ (C D)ᵀ`` and the core's :func:`~lincomb._core.wald_from_root`
does the rest.  Redundant and contradictory rows are found by
:func:`~lincomb._core.analyze_rows` on ``C D``, which does not change when a coefficient and
its covariance are rescaled together.  The row space of a singular covariance is a property of
the coordinates given (it is not preserved by rescaling coefficients); for the Moore–Penrose
covariance of a rank-deficient least-squares fit it is the space of estimable rows.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field
from functools import cached_property

import numpy as np
import pandas as pd
from numpy.typing import ArrayLike, NDArray

from lincomb import _core as core
from lincomb._builder.resolver import ModelResolver
from lincomb._core.checks import check_level
from lincomb._covariance.given import refuse_nonfinite
from lincomb._covariance.reference import check_reference, reference_result
from lincomb._docstrings import fill_doc
from lincomb._fit.coef_table import coefficient_frame
from lincomb._fit.resolving import ResolvesRestrictions
from lincomb._fit.restriction_rows import refuse_inconsistent
from lincomb._model.design import CoefficientIndex, _parse_levels
from lincomb._model.encoder import FormulaEncoder
from lincomb._results.format import _num, _p, _table_html, _table_text
from lincomb._results.report import ReportTables
from lincomb._results.wald import WaldTest, assemble_wald_test
from lincomb.errors import (
    CovarianceInputError,
    InputError,
    NotEstimableError,
)

__all__ = ["COVARIANCE_RANK_TOL", "SYMMETRY_TOL", "EstimatesFit", "from_estimates"]

#: An eigenvalue of the scaled (correlation-form) covariance at most this fraction of the
#: largest counts as zero; one below minus this fraction makes the matrix indefinite.
COVARIANCE_RANK_TOL: float = 1e-10

#: ``|V_ij − V_ji|`` above this fraction of ``sqrt(V_ii V_jj)`` makes the matrix asymmetric.
SYMMETRY_TOL: float = 1e-8

#: The start of an Examples section on ``e``, two uncorrelated estimates ``a`` and ``b``.
_TWO_ESTIMATES = """\
Examples
--------
>>> import lincomb as lc
>>> e = lc.from_estimates([1.0, 2.0], [[1.0, 0.0], [0.0, 4.0]], names=["a", "b"])"""

_estimates_doc = fill_doc(two_estimates=_TWO_ESTIMATES)


@_estimates_doc
@dataclass(frozen=True)
class EstimatesFit(ResolvesRestrictions, ReportTables):
    """Estimates and their covariance from any model, ready for Wald tests.

    Built by :func:`from_estimates`; frozen.

    Attributes
    ----------
    names : tuple of str
        Coefficient names, in the order of the estimates.
    coefficients : pandas.Series
        The estimates (a copy of the input).
    df_error : float or None
        Residual degrees of freedom (``None``: large-sample, tests refer to chi-squared).
    rank : int
        Numerical rank of the covariance.
    label : str
        Name of the covariance in every result (default ``"supplied"``).

    %(two_estimates)s
    >>> e.names, e.rank, e.df_error
    (('a', 'b'), 2, None)
    >>> res = e.wald(lc.coef("a") == 0)
    >>> res.reference, round(res.stat, 6)
    ('chi2', 1.0)
    """

    names: tuple[str, ...]
    coefficients: pd.Series
    df_error: float | None
    rank: int
    _cov: NDArray[np.float64] = field(repr=False, compare=False)
    _scale: NDArray[np.float64] = field(repr=False, compare=False)
    _basis: NDArray[np.float64] = field(repr=False, compare=False)
    _root_scale: NDArray[np.float64] = field(repr=False, compare=False)
    _index: CoefficientIndex = field(repr=False, compare=False)
    label: str = "supplied"
    _encoder: FormulaEncoder | None = field(repr=False, compare=False, default=None)

    # -- basic quantities ---------------------------------------------------------------
    @property
    def index(self) -> CoefficientIndex:
        """The coefficient index (names, terms, levels) used to resolve restrictions."""
        return self._index

    def covariance(self) -> pd.DataFrame:
        """Covariance matrix of the estimates, as validated (symmetrized), labelled by name.

        Examples
        --------
        >>> import lincomb as lc
        >>> e = lc.from_estimates([1.0, 2.0], [[1.0, 0.5], [0.5, 4.0]], names=["a", "b"])
        >>> e.covariance().loc["a", "b"]
        np.float64(0.5)
        """
        return pd.DataFrame(self._cov.copy(), index=list(self.names), columns=list(self.names))

    def std_errors(self) -> pd.Series:
        """Standard errors: square roots of the covariance's diagonal.

        Examples
        --------
        >>> import lincomb as lc
        >>> lc.from_estimates([1.0, 2.0], [[1.0, 0.0], [0.0, 4.0]]).std_errors().tolist()
        [1.0, 2.0]
        """
        return pd.Series(np.sqrt(np.diag(self._cov)), index=list(self.names), name="se")

    def _reference(self, reference: str | None) -> str:
        if reference is None:
            return "F" if self.df_error is not None else "chi2"
        ref = check_reference(reference)
        if ref == "F" and self.df_error is None:
            raise InputError(
                "reference='F' needs residual degrees of freedom, and these estimates have"
                " none: pass df_error= to from_estimates, or use reference='chi2'."
            )
        return ref

    def _df(self, ref: str) -> float:
        return float(self.df_error) if ref == "F" and self.df_error is not None else np.inf

    @_estimates_doc
    def coef_frame(self, level: float = 0.95, *, reference: str | None = None) -> pd.DataFrame:
        """One row per coefficient: estimate, standard error, ratio, p-value, interval.

        Parameters
        ----------
        level : float, default 0.95
            Confidence level of the intervals.
        reference : {'F', 'chi2'}, optional
            ``'F'``: t with ``df_error``; ``'chi2'``: standard normal.  Default: ``'F'`` when
            the estimates carry ``df_error``, else ``'chi2'``.

        Columns: ``coefficient, term, estimate, se, ratio, p, lower, upper, level, status,
        reference, df_error, covariance``; ``status`` is ``"estimable"``, or ``"not
        estimable"`` for a coefficient outside the row space of a singular covariance (its
        ratio and p are then NaN).

        %(two_estimates)s
        >>> e.coef_frame()[["coefficient", "ratio", "reference"]].values.tolist()
        [['a', 1.0, 'chi2'], ['b', 1.0, 'chi2']]
        """
        check_level(level)
        ref = self._reference(reference)
        testable = self._residual(np.eye(len(self.names))) <= core.ROW_TOL
        return coefficient_frame(
            self._index,
            self.coefficients.to_numpy(),
            self.std_errors().to_numpy(),
            level=level,
            reference=ref,
            df_error=self._df(ref),
            status=np.where(testable, "estimable", "not estimable"),
            covariance=self.label,
            testable=testable,
        )

    # -- restrictions -------------------------------------------------------------------
    @cached_property
    @_estimates_doc
    def resolver(self) -> ModelResolver:
        """The resolver of restriction names on these estimates, built once and reused by
        every test (the coefficient index, with the formula encoder when one was given).

        %(two_estimates)s
        >>> e.resolver is e.resolver, e.resolver.column("b")
        (True, 1)
        """
        return ModelResolver(self._index, self._encoder)

    def _working(self, c: NDArray[np.float64]) -> NDArray[np.float64]:
        """Rows of ``C`` in scaled coordinates (``C D``)."""
        out: NDArray[np.float64] = c * self._scale
        return out

    def _residual(self, c: NDArray[np.float64]) -> NDArray[np.float64]:
        """Relative distance of each row from the covariance's row space.

        ``c`` lies in the row space of ``V = D·P·D`` (``P`` the correlation form) exactly when
        ``c D⁻¹`` lies in the span of ``P``'s kept eigenvectors; the distance is measured there.
        """
        w = c / self._scale
        resid = w - (w @ self._basis) @ self._basis.T
        norms = core.safe_norm(w, axis=1)
        with np.errstate(divide="ignore", invalid="ignore"):
            out: NDArray[np.float64] = np.where(
                norms > 0, core.safe_norm(resid, axis=1) / norms, 0.0
            )
        return out

    def wald(self, restrictions: object, *, reference: str | None = None) -> WaldTest:
        """Wald test of ``C·β = d``: one statistic for the system and a ratio for each row.

        Parameters
        ----------
        restrictions : Restriction, RestrictionSystem, or list of them
            Built with :func:`~lincomb.coef`, :func:`~lincomb.term`, ``==`` and ``&``,
            :func:`~lincomb.from_matrix`, or (with ``formula=`` and ``data=`` given to
            :func:`from_estimates`) :func:`~lincomb.levels`.
        reference : {'F', 'chi2'}, optional
            ``'F'``: statistic / rank against F with ``df_error`` denominator degrees of
            freedom, rows against t; ``'chi2'``: the Wald form against chi-squared, rows against
            the standard normal.  Default: ``'F'`` when the estimates carry ``df_error``, else
            ``'chi2'``.

        Returns
        -------
        WaldTest

        Raises
        ------
        NotEstimableError
            A row does not lie in the row space of a singular covariance.
        InconsistentRestrictionError
            A redundant row carries a ``d`` that contradicts the rows it depends on.
        InputError
            ``reference='F'`` without ``df_error``.

        Notes
        -----
        Redundant rows are reported on the result (``redundant``) and do not count in the
        rank.  With a singular covariance only rows in its row space can be tested: any other
        row has a component whose sampling variance the covariance claims is zero, and no
        valid test of it exists.

        Examples
        --------
        >>> import lincomb as lc
        >>> e = lc.from_estimates(
        ...     [1.0, 2.0, 0.5], [[1.0, 0.2, 0], [0.2, 4.0, 0], [0, 0, 0.25]],
        ...     names=["a", "b", "c"], df_error=30,
        ... )
        >>> res = e.wald((lc.coef("a") == 0) & (lc.coef("b") == lc.coef("c")))
        >>> res.df_test, res.df_error, res.reference
        (2, 30.0, 'F')
        """
        ref = self._reference(reference)
        c, d, labels = self.resolve(restrictions)
        resid = self._residual(c)
        bad = np.flatnonzero(resid > core.ROW_TOL)
        if bad.size:
            rows = "; ".join(f"row {int(i)} ({labels[int(i)]})" for i in bad)
            raise NotEstimableError(
                f"restriction not testable with this singular covariance (rank {self.rank} of"
                f" {len(self.names)}): {rows} leaves its row space. Restate the rows as"
                " combinations the covariance gives a variance for (see"
                " EstimatesFit.coef_frame's status), or supply a covariance of full rank."
            )
        # redundancy on C·D: unchanged when a coefficient and its covariance are rescaled
        analysis = core.analyze_rows(self._working(c), d, core.ROW_TOL)
        refuse_inconsistent(analysis, labels)
        root = self._root_scale[:, None] * (self._working(c) @ self._basis).T
        est = c @ self.coefficients.to_numpy()
        wc = core.wald_from_root(est - d, root, analysis.independent)
        return assemble_wald_test(
            labels,
            est,
            d,
            wc,
            reference_result(wc.quad, wc.rank, self._df(ref), ref),
            covariance=self.label,
            redundant=analysis.dependencies,
            c=c,
            names=self.names,
            root=root,
        )

    # -- presentation -------------------------------------------------------------------
    def _head(self) -> str:
        ref = "F / t" if self.df_error is not None else "chi2 / normal"
        dfe = f", df_error {self.df_error:g}" if self.df_error is not None else ""
        return (
            f"Estimates of {len(self.names)} coefficients with a {self.label} covariance"
            f" (rank {self.rank}{dfe}); tests refer to {ref}"
        )

    def _rows(self) -> list[list[str]]:
        frame = self.coef_frame()
        cols = [frame[c].to_numpy(dtype=np.float64) for c in ("estimate", "se", "ratio", "p")]
        return [
            [name, _num(est), _num(se), _num(ratio), _p(p)]
            for name, est, se, ratio, p in zip(self.names, *cols, strict=True)
        ]

    def _header(self) -> list[str]:
        return ["coefficient", "estimate", "s.e.", "t" if self.df_error is not None else "z", "p"]

    def __repr__(self) -> str:
        return f"{self._head()}\n{_table_text(self._header(), self._rows())}"

    def _repr_html_(self) -> str:
        import html

        table = _table_html(self._header(), self._rows())
        return f"<div class='lincomb-fit'><p><b>{html.escape(self._head())}</b></p>{table}</div>"


# ---------------------------------------------------------------------------------------------
# validation
# ---------------------------------------------------------------------------------------------
def _float_copy(raw: object, what: str) -> NDArray[np.float64]:
    """A float64 copy of the ``estimates`` or the ``covariance``; an entry that is not a number
    raises (:class:`~lincomb.errors.CovarianceInputError` for the covariance)."""
    try:
        return np.array(raw, dtype=np.float64, copy=True)
    except (TypeError, ValueError) as exc:
        if what == "covariance":
            raise CovarianceInputError(f"the covariance must be numbers: {exc}.") from None
        raise InputError(f"the {what} must be numbers: {exc}.") from None


def _estimates(
    estimates: ArrayLike | pd.Series, names: Sequence[str] | None
) -> tuple[NDArray[np.float64], list[str]]:
    labels: list[str] | None = None
    if isinstance(estimates, pd.Series):
        # a default (range) index carries no names
        if not isinstance(estimates.index, pd.RangeIndex):
            labels = [str(s) for s in estimates.index]
        raw: object = estimates.to_numpy()
    else:
        raw = estimates
    b = _float_copy(raw, "estimates")
    if b.ndim != 1 or b.size == 0:
        raise InputError(f"the estimates must be a non-empty vector; got shape {b.shape}.")
    if names is not None:
        given = [str(s) for s in names]
        if len(given) != b.size:
            raise InputError(f"{len(given)} names given for {b.size} estimates.")
        if labels is not None and labels != given:
            raise InputError(
                f"names= {given} differ from the estimates' index {labels}; give one of them."
            )
        labels = given
    if labels is None:
        labels = [f"x{j}" for j in range(b.size)]
    if len(set(labels)) != len(labels):
        dup = sorted({s for s in labels if labels.count(s) > 1})
        raise InputError(f"coefficient names must be unique; repeated: {dup}.")
    bad = [labels[j] for j in np.flatnonzero(~np.isfinite(b))]
    if bad:
        raise InputError(
            f"estimates of {bad} are not finite (NaN or inf). Drop those coefficients (an"
            " aliased coefficient has no estimate) from the estimates and the covariance."
        )
    return b, labels


def _covariance(covariance: ArrayLike | pd.DataFrame, names: list[str]) -> NDArray[np.float64]:
    k = len(names)
    if isinstance(covariance, pd.DataFrame):
        rows = [str(s) for s in covariance.index]
        cols = [str(s) for s in covariance.columns]
        for what, labels in (("rows", rows), ("columns", cols)):
            missing = [s for s in names if s not in labels]
            extra = [s for s in labels if s not in names]
            if missing or extra or len(labels) != k:
                raise CovarianceInputError(
                    f"the covariance's {what} do not match the estimates' names: missing"
                    f" {missing}, unexpected {extra}. Label both with the same coefficient"
                    " names."
                )
        frame = covariance.set_axis(rows, axis=0).set_axis(cols, axis=1)
        raw: object = frame.loc[names, names].to_numpy()
    else:
        raw = covariance
    v = _float_copy(raw, "covariance")
    if v.shape != (k, k):
        raise CovarianceInputError(
            f"the covariance must be {k} × {k} for {k} estimates; got shape {v.shape}."
        )
    refuse_nonfinite(v, names, "the covariance", "every entry must be finite.")
    diag = np.diag(v)
    neg = np.flatnonzero(diag < 0)
    if neg.size:
        raise CovarianceInputError(
            f"the covariance has a negative variance for {[names[int(j)] for j in neg]}"
            f" ({diag[neg[0]]:.6g}); a covariance matrix is positive semi-definite."
        )
    sd = np.sqrt(diag)
    gap = np.abs(v - v.T)
    limit = SYMMETRY_TOL * np.outer(sd, sd)
    asym = np.argwhere(gap > limit)
    if asym.size:
        i, j = (int(t) for t in asym[0])
        raise CovarianceInputError(
            f"the covariance is not symmetric: entry ({names[i]}, {names[j]}) is {v[i, j]:.6g}"
            f" but ({names[j]}, {names[i]}) is {v[j, i]:.6g} (tolerance {SYMMETRY_TOL:g} of"
            " sqrt(V_ii V_jj)). Pass the full symmetric matrix."
        )
    out: NDArray[np.float64] = (v + v.T) / 2
    return out


def _index(
    names: list[str],
    terms: Mapping[str, Sequence[str]] | None,
    formula: str | None,
    data: pd.DataFrame | None,
) -> tuple[CoefficientIndex, FormulaEncoder | None]:
    if (formula is None) != (data is None):
        raise InputError("give formula= and data= together (the fit that made the estimates).")
    if formula is not None and data is not None:
        if terms is not None:
            raise InputError("give either terms= or formula= and data=, not both.")
        encoder = FormulaEncoder.learn(formula, data)[0]
        if list(encoder.index.names) != names:
            raise InputError(
                f"the formula's coefficients {list(encoder.index.names)} differ from the"
                f" estimates' names {names}: name the estimates as the formula names its"
                " columns, in the same order."
            )
        return encoder.index, encoder
    if terms is None:
        return _index_from_names(names), None
    groups: dict[str, tuple[int, ...]] = {}
    if terms is not None:
        for label, members in terms.items():
            cols = []
            for s in members:
                if str(s) not in names:
                    raise InputError(
                        f"terms[{label!r}] names {s!r}, which is not a coefficient; known: {names}."
                    )
                cols.append(names.index(str(s)))
            groups[str(label)] = tuple(cols)
    for j, s in enumerate(names):
        groups.setdefault(s, (j,))
    index = CoefficientIndex(
        names=tuple(names), terms=groups, levels=tuple(() for _ in names), factors={}
    )
    return index, None


def _split_name(name: str) -> list[str]:
    """Split a column name at the ``:`` between factors (not inside brackets or calls)."""
    parts, depth, start = [], 0, 0
    for i, ch in enumerate(name):
        if ch in "([":
            depth += 1
        elif ch in ")]":
            depth -= 1
        elif ch == ":" and depth == 0:
            parts.append(name[start:i])
            start = i + 1
    parts.append(name[start:])
    return parts


def _index_from_names(names: list[str]) -> CoefficientIndex:
    """Terms and levels read from formula-style names (``g[T.b]``, ``a[x]:b[T.y]``, ``x``).

    Each name is split into factors at ``:``; a factor written ``expr[level]`` codes a level
    of ``expr``.  Columns whose factors agree form one term, so :func:`~lincomb.term` and
    level indexing work as on a fit; ``Intercept`` is the intercept term.

    Examples
    --------
    >>> index = _index_from_names(["Intercept", "g[T.b]", "g[T.c]", "x", "g[T.b]:x"])
    >>> index.terms
    {'1': (0,), 'g': (1, 2), 'x': (3,), 'g:x': (4,)}
    >>> index.level_column("g", ("c",))
    2
    """
    groups: dict[str, list[int]] = {}
    factors: dict[str, tuple[str, ...]] = {}
    levels: list[tuple[str | None, ...]] = []
    for j, name in enumerate(names):
        if name == "Intercept":
            groups.setdefault("1", []).append(j)
            factors["1"] = ()
            levels.append(())
            continue
        exprs = []
        for part in _split_name(name):
            cut = part.find("[")
            exprs.append(part[:cut] if cut > 0 and part.endswith("]") else part)
        label = ":".join(exprs)
        parsed = _parse_levels(name, exprs) if label != name else ()
        if label != name and not parsed:
            label, parsed = name, ()
        groups.setdefault(label, []).append(j)
        factors[label] = tuple(exprs)
        levels.append(parsed)
    return CoefficientIndex(
        names=tuple(names),
        terms={k: tuple(v) for k, v in groups.items()},
        levels=tuple(levels),
        factors=factors,
    )


def from_estimates(
    estimates: ArrayLike | pd.Series,
    covariance: ArrayLike | pd.DataFrame,
    *,
    names: Sequence[str] | None = None,
    df_error: float | None = None,
    terms: Mapping[str, Sequence[str]] | None = None,
    formula: str | None = None,
    data: pd.DataFrame | None = None,
    label: str = "supplied",
) -> EstimatesFit:
    """Estimates and their covariance from any model, as an object that takes Wald tests.

    Parameters
    ----------
    estimates : (k,) array_like or pandas.Series
        The estimates; a Series names them by its index.
    covariance : (k, k) array_like or pandas.DataFrame
        Their covariance; a DataFrame is matched to the names by its labels (any order).  It
        may be singular (see :meth:`EstimatesFit.wald`).
    names : sequence of str, optional
        Coefficient names (default: the Series' index, else ``x0, x1, ...``).
    df_error : float, optional
        Residual degrees of freedom: tests then refer to F and t by default.  Without it they
        refer to chi-squared and the normal (large-sample).
    terms : mapping, optional
        ``{term: [coefficient names]}`` so that :func:`~lincomb.term` can name a group.
        Without it (and without ``formula``), terms and levels are read from formula-style
        names: ``g[T.b]`` and ``g[T.c]`` form the term ``g``, indexed by level as on a fit.
    formula, data : str and pandas.DataFrame, optional
        The formula and data that produced the estimates (their coefficient names must be the
        formula's columns, in order): terms, levels and level-mean contrasts
        (:func:`~lincomb.levels`) then resolve as on a fit.
    label : str, default 'supplied'
        Name of the covariance in every result.

    Returns
    -------
    EstimatesFit

    Raises
    ------
    InputError
        Estimates not a finite vector, names that do not match or repeat, a ``df_error`` that
        is not positive.
    CovarianceInputError
        Covariance of the wrong shape, with labels that do not match the names, non-finite,
        asymmetric (beyond :data:`SYMMETRY_TOL`) or not positive semi-definite (an eigenvalue
        below ``-COVARIANCE_RANK_TOL`` times the largest, on the correlation scale).

    Notes
    -----
    The covariance is scaled to correlation form and factored by a symmetric eigen-
    decomposition; its rank counts eigenvalues above :data:`COVARIANCE_RANK_TOL` times the
    largest.  Nothing is inverted.

    Examples
    --------
    >>> import pandas as pd, lincomb as lc
    >>> b = pd.Series([0.8, -0.3], index=["dose", "age"])
    >>> v = pd.DataFrame([[0.04, 0.01], [0.01, 0.09]], index=b.index, columns=b.index)
    >>> e = lc.from_estimates(b, v)
    >>> res = e.wald(lc.coef("dose") == 0.5)
    >>> round(float(res.ratio[0]), 6)
    1.5
    """
    b, labels = _estimates(estimates, names)
    v = _covariance(covariance, labels)
    if df_error is not None:
        dfe = float(df_error)
        if not (np.isfinite(dfe) and dfe > 0):
            raise InputError(
                f"df_error must be a positive finite number, got {df_error!r}; leave it out"
                " for a large-sample (chi-squared) reference."
            )
    sd = np.sqrt(np.diag(v))
    scale = np.where(sd > 0, sd, 1.0)
    corr = v / np.outer(scale, scale)
    lam, vec = np.linalg.eigh(corr)
    top = float(lam[-1]) if lam.size else 0.0
    if top <= 0:
        raise CovarianceInputError(
            "the covariance is zero: no estimate has a variance, so nothing can be tested."
        )
    if lam[0] < -COVARIANCE_RANK_TOL * top:
        worst = vec[:, 0]
        lead = [labels[int(j)] for j in np.argsort(-np.abs(worst))[:3]]
        raise CovarianceInputError(
            "the covariance is not positive semi-definite: on the correlation scale it has"
            f" eigenvalue {lam[0]:.3g} (largest {top:.3g}), mostly along {lead}. Check that it"
            " is the covariance of these estimates, in this order."
        )
    keep = lam > COVARIANCE_RANK_TOL * top
    index, encoder = _index(labels, terms, formula, data)
    return EstimatesFit(
        names=tuple(labels),
        coefficients=pd.Series(b, index=labels, name="estimate"),
        df_error=None if df_error is None else float(df_error),
        rank=int(keep.sum()),
        label=str(label),
        _cov=v,
        _scale=scale,
        _basis=np.ascontiguousarray(vec[:, keep]),
        _root_scale=np.sqrt(lam[keep]),
        _index=index,
        _encoder=encoder,
    )
