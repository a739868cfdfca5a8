"""A table of joint tests, one per term of the formula, under three adjustment schemes.

Each term's test is a Wald test of a restriction system on the full fit, so it works under any
covariance estimator and uses the fit's rank decision.  The rows are found on the small R
factor of the kept working columns (never on the data): reorder its columns as
``[adjusted-for, term, rest]`` and refactor by QR; the term's rows of the new triangle, applied
to the working coefficients, are the term's effect after the columns before it.  Under the
classical covariance those rows have covariance ``σ² I``, so the Wald form is the term's sum of
squares over ``σ²``; a robust estimator gives the robust test of the same hypothesis.

Schemes (``adjusted_for=``):

* ``"preceding"``: each term adjusted for the terms before it in formula order (sequential);
* ``"non-containing"``: adjusted for every term that does not contain it (a term contains
  another when its factors are a proper superset: ``a:b`` contains ``a``), so main effects are
  not adjusted for their interactions (marginality);
* ``"all-others"``: adjusted for every other term (the same as the joint test that the term's
  coefficients are zero, so it depends on the coding once the term enters an interaction).

Degrees of freedom are the term's kept (non-aliased) columns; a term whose columns are all
aliased gets ``df_test = 0`` and no statistic.  The intercept is not tested.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import TYPE_CHECKING

import numpy as np
import pandas as pd
import scipy.linalg as sla
from numpy.typing import NDArray

from lincomb import _core as core
from lincomb._covariance.estimate import check_rank
from lincomb._covariance.reference import check_reference, reference_result
from lincomb._results.expected import reference_fields
from lincomb._results.format import TableRepr, _num, _p
from lincomb._results.frames import field_frame
from lincomb._typing import Array
from lincomb.errors import InputError, SingularCovarianceError

if TYPE_CHECKING:  # pragma: no cover
    from lincomb._fit.linear import LinearFit

__all__ = ["TermTests", "term_tests", "SCHEMES", "TERM_COLUMNS"]


#: The adjustment schemes and what each term is adjusted for.
SCHEMES = {
    "preceding": "the terms before it in the formula",
    "non-containing": "every term that does not contain it",
    "all-others": "every other term",
}
#: Columns of :meth:`TermTests.test_frame`.
TERM_COLUMNS = ("term", "df_test", "ss", "stat", "df_error", "p", "reference", "covariance")


@dataclass(frozen=True, repr=False)
class TermTests(TableRepr):
    """Joint tests of each term of a fit.

    Made by :meth:`LinearFit.term_tests <lincomb.LinearFit.term_tests>`.

    Attributes
    ----------
    terms : tuple of str
        Term labels in formula order (the intercept left out).
    adjusted_for : str
        The scheme (see :mod:`lincomb._results.term_tests`).
    df_test : (t,) ndarray of int
        Numerator degrees of freedom per term (its kept columns).
    ss : (t,) ndarray
        Classical sum of squares of each term under the scheme (the squared norm of the
        term's rows of the reordered R factor; in the response's squared units).
    stat : (t,) ndarray
        F (or chi-squared with ``reference='chi2'``) under the covariance estimator.
    p : (t,) ndarray
    df_error : float
        Denominator degrees of freedom (``inf`` for chi-squared).
    rss : float
        Residual sum of squares of the fit.
    fit_df_error : int
        Residual degrees of freedom of the fit.
    reference : {'F', 'chi2'}
    covariance : str

    Examples
    --------
    >>> import lincomb as lc
    >>> f = lc.fit("fill_g ~ line * shift + temperature_c", lc.datasets.fill_lines())
    >>> tab = f.term_tests("non-containing")
    >>> tab.terms
    ('line', 'shift', 'temperature_c', 'line:shift')
    >>> tab.test_frame()["df_test"].tolist()
    [3, 2, 1, 6]
    """

    terms: tuple[str, ...]
    adjusted_for: str
    df_test: NDArray[np.intp]
    ss: Array
    stat: Array
    p: Array
    df_error: float
    rss: float
    fit_df_error: int
    reference: str
    covariance: str

    def test_frame(self) -> pd.DataFrame:
        """One row per term.

        Returns
        -------
        pandas.DataFrame
            Columns ``term, df_test, ss, stat, df_error, p, reference, covariance``.

        Examples
        --------
        >>> import lincomb as lc
        >>> f = lc.fit("fill_g ~ line + shift", lc.datasets.fill_lines())
        >>> list(f.term_tests().test_frame().columns)[:4]
        ['term', 'df_test', 'ss', 'stat']
        """
        return field_frame(self, TERM_COLUMNS, term="terms")

    def _parts(self) -> tuple[str, list[str], list[list[str]], str]:
        head = (
            f"Term tests, each term adjusted for {SCHEMES[self.adjusted_for]}"
            f" ({self.covariance} covariance; "
            + (f"F with {self.df_error:g} denominator df)" if self.reference == "F" else "chi2)")
        )
        name = "F" if self.reference == "F" else "chi2"
        header = ["term", "df_test", "sum of squares", name, "p"]
        rows = [
            [t, str(int(d)), _num(s), _num(f), _p(p)]
            for t, d, s, f, p in zip(
                self.terms, self.df_test, self.ss, self.stat, self.p, strict=True
            )
        ]
        tail = f"residual: df {self.fit_df_error}, sum of squares {_num(self.rss)}"
        return head, header, rows, tail


def _contains(big: frozenset[str], small: frozenset[str]) -> bool:
    return bool(small) and small < big


def term_rows(sol: core.Solution, first: list[int], term: list[int]) -> Array:
    """Rows (in kept working coordinates) of the term's effect after the ``first`` positions.

    ``first`` and ``term`` are positions among the kept working columns.  The kept triangle's
    columns are reordered ``[first, term, rest]`` and refactored by QR (``R`` only); the term's
    rows of the new triangle, put back in the kept order, are returned (``len(term) × rank``).

    Examples
    --------
    >>> import numpy as np, lincomb as lc
    >>> f = lc.fit_arrays(np.c_[np.ones(6), [0.0, 1, 2, 3, 4, 6], [1.0, 0, 2, 1, 0, 1]],
    ...                   [1.0, 2, 4, 3, 5, 7])
    >>> rows = term_rows(f.solution, [0, 1], [2])
    >>> rows.shape
    (1, 3)
    """
    rank = sol.rank
    rest = [j for j in range(rank) if j not in set(first) | set(term)]
    order = first + term + rest
    rp = sla.qr(sol.r[:, order], mode="r", check_finite=False)[0]
    sel = rp[len(first) : len(first) + len(term), :]
    out = np.zeros((len(term), rank))
    out[:, order] = sel
    return out


def term_tests(
    fit: LinearFit, adjusted_for: str, *, covariance: object, reference: str
) -> TermTests:
    """The computation behind :meth:`LinearFit.term_tests`, which documents the arguments and
    holds their defaults.

    Examples
    --------
    >>> import lincomb as lc
    >>> f = lc.fit("fill_g ~ line", lc.datasets.fill_lines())
    >>> term_tests(f, "preceding", covariance=None, reference="F").terms
    ('line',)
    """
    if adjusted_for not in SCHEMES:
        raise InputError(
            f"adjusted_for must be one of {list(SCHEMES)} (sequential, marginality, every"
            f" other term); got {adjusted_for!r}."
        )
    ref = check_reference(reference)
    fit.check_variance()
    vcov = fit.evaluate_covariance(covariance)
    sol = fit.solution
    index = fit.index
    pos = {int(c): i for i, c in enumerate(sol.kept)}
    labels = [t for t in index.terms if t != "1"]
    facs = {t: frozenset(index.factors.get(t, ())) for t in index.terms}
    intercept = [pos[sol.intercept]] if sol.intercept is not None else []
    order = list(index.terms)
    n_t = len(labels)
    df = np.zeros(n_t, dtype=np.intp)
    ss = np.full(n_t, np.nan)
    stat = np.full(n_t, np.nan)
    pval = np.full(n_t, np.nan)
    for i, t in enumerate(labels):
        mine = [pos[c] for c in index.terms[t] if c in pos]
        if adjusted_for == "preceding":
            before = order[: order.index(t)]
            others = [u for u in before if u != "1"]
        elif adjusted_for == "non-containing":
            others = [u for u in labels if u != t and not _contains(facs[u], facs[t])]
        else:
            others = [u for u in labels if u != t]
        first = list(intercept)
        for u in others:
            first += [pos[c] for c in index.terms[u] if c in pos]
        df[i] = len(mine)
        if not mine:
            continue
        c = term_rows(sol, first, mine)
        est = c @ sol.theta
        ss[i] = float(est @ est)
        root = vcov.root(c)
        independent = np.arange(len(mine))
        try:
            chol = check_rank(root, independent, [t] * len(mine), vcov)
        except SingularCovarianceError:
            continue  # the estimator cannot test this many directions: no statistic
        wc = core.wald_from_root(est, root, independent, chol)
        _dist, stat[i], _df, pval[i] = reference_result(wc.quad, wc.rank, vcov.df_error, ref)
    return TermTests(
        terms=tuple(labels),
        adjusted_for=adjusted_for,
        df_test=df,
        ss=ss,
        stat=stat,
        p=pval,
        rss=fit.rss,
        fit_df_error=fit.df_error,
        **reference_fields(vcov, ref),
    )
