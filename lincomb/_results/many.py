"""The result of one restriction system tested on every response of a many-response fit.

:class:`ManyWaldTest` speaks the vocabulary of every Wald result (:mod:`lincomb._results.frames`):
``stat``, ``df_test``, ``df_error``, ``p``, ``se``, ``ratio``, ``row_p``, ``row_frame`` and
``test_frame`` (each with a leading ``response`` column).  Its frames add the p-values adjusted
across responses (``p_adjusted``, named in ``adjustment``) and each response's ``n_obs``.
"""

from __future__ import annotations

import functools
from dataclasses import dataclass, field
from typing import Any, cast

import numpy as np
import pandas as pd
from numpy.typing import NDArray

from lincomb._docstrings import fill_doc
from lincomb._results.format import _html_lines, _num, _p, _table_html, _table_text
from lincomb._results.frames import ROW_COLUMNS, TEST_COLUMNS, WaldResult, _Groups, roles
from lincomb._results.multiplicity import P_METHODS, _adjust, _canonical

__all__ = ["ManyWaldTest", "SCREEN_COLUMNS", "SCREEN_ROW_COLUMNS", "STATUSES"]

#: Status of a response (and of its test), in code order.
STATUSES = ("ok", "too few rows", "exact fit", "not estimable")

#: What a many-response frame adds after the shared columns.
MANY_EXTRA_COLUMNS = ("p_adjusted", "adjustment", "n_obs")
#: Columns of :meth:`ManyWaldTest.test_frame` (one row per response).
SCREEN_COLUMNS = ("response", *TEST_COLUMNS, *MANY_EXTRA_COLUMNS)
#: Columns of :meth:`ManyWaldTest.row_frame` (one row per response × restriction row).
SCREEN_ROW_COLUMNS = ("response", *ROW_COLUMNS, *MANY_EXTRA_COLUMNS)


def fdr_adjust(p: NDArray[np.float64], method: str | None) -> tuple[NDArray[np.float64], str]:
    """Adjust the finite p-values (NaN stay NaN); ``None`` means no adjustment.

    The p-values are this package's own (in ``[0, 1]`` or NaN), so only the method is checked
    (as :func:`~lincomb.multiplicity.adjust_pvalues` checks it, with its message).
    """
    if method is None or (isinstance(method, str) and method.strip().lower() == "none"):
        return p.copy(), "none"
    key = _canonical(method, P_METHODS, "p-value")
    out = np.full(p.shape, np.nan)
    ok = np.isfinite(p)
    out[ok] = _adjust(p[ok], key)
    return out, key


#: The example set-up of the methods below: six markers of the assay panel tested for a
#: treatment effect.
_MARKER_SCREEN = """\
>>> import lincomb as lc
>>> panel = lc.datasets.assay_panel()
>>> markers = ["g0001", "g0002", "g0003", "g0004", "g0005", "g0006"]
>>> res = lc.fit_many("~ treatment + batch", panel, responses=markers).wald(
...     lc.term("treatment") == 0)"""
_screen_doc = fill_doc(marker_screen=_MARKER_SCREEN)


@functools.lru_cache(maxsize=64)
def _labels_dtype(labels: tuple[str, ...]) -> pd.CategoricalDtype:
    """The categorical dtype of ``labels`` (dtypes are immutable: built and validated once)."""
    return pd.CategoricalDtype(pd.Index(list(labels)))


def from_codes(codes: NDArray[np.integer], labels: tuple[str, ...]) -> pd.Categorical[str]:
    """A categorical column of ``labels[codes]`` (the dtype is built once per set of labels)."""
    dtype: Any = _labels_dtype(labels)  # pandas-stubs type from_codes' dtype as integer
    return cast("pd.Categorical[str]", pd.Categorical.from_codes(codes, dtype=dtype))


def _repeat(value: str, r: int) -> pd.Categorical[str]:
    """A column holding one label ``r`` times (categorical: cheap for many rows)."""
    return from_codes(np.zeros(r, dtype=np.int8), (value,))


@dataclass(frozen=True)
class ManyWaldTest(WaldResult):
    """One restriction system ``C·β = d`` tested on every response of a :class:`ManyFit`.

    Attributes
    ----------
    responses : tuple of str
    labels : tuple of str
        The system's rows as algebra.
    estimate : (r, m) ndarray
        ``Cβ̂`` per response (rows) and restriction row (columns).
    target : (m,) ndarray
        ``d``.
    se : (r, m) ndarray
        Standard error of each row's estimate.
    ratio : (r, m) ndarray
        ``(Cβ̂ - d) / se``, a t ratio with the response's ``df_error``.
    stat : (r,) ndarray
        F statistic per response (NaN unless the status is ``"ok"``).
    df_test : int
        Rank of ``C`` (redundant rows do not count).
    df_error : (r,) ndarray
        Error degrees of freedom per response.
    p : (r,) ndarray
        p-value of each response's F test.
    status : (r,) ndarray of str
        Per response: ``"ok"``, ``"too few rows"``, ``"exact fit"`` or ``"not estimable"``.
    n_obs : (r,) ndarray of int
    redundant : dict
        ``{row: {independent row: weight}}`` for redundant rows of the system.
    reference : str
        ``"F"``.
    covariance : str
        ``"classical"``.

    Examples
    --------
    >>> import numpy as np, lincomb as lc
    >>> rng = np.random.default_rng(3)
    >>> x = np.column_stack([np.ones(40), rng.normal(size=(40, 2))])
    >>> ys = rng.normal(size=(40, 5)); ys[:, 0] += 2 * x[:, 1]
    >>> res = lc.fit_many_arrays(x, ys, names=["one", "a", "b"]).wald(lc.coef("a") == 0)
    >>> int(np.argmin(res.p)), res.test_frame().shape
    (0, (5, 15))
    """

    responses: tuple[str, ...]
    labels: tuple[str, ...]
    estimate: NDArray[np.float64]
    target: NDArray[np.float64]
    se: NDArray[np.float64]
    ratio: NDArray[np.float64]
    stat: NDArray[np.float64]
    df_test: int
    df_error: NDArray[np.float64]
    p: NDArray[np.float64]
    status: NDArray[np.str_]
    n_obs: NDArray[np.int64]
    redundant: dict[int, dict[int, float]] = field(default_factory=dict)
    reference: str = "F"
    covariance: str = "classical"
    # the responses as an Index and the status codes (positions in STATUSES), when the fit
    # has them: the frames reuse them instead of converting r strings again
    _response_index: pd.Index | None = field(default=None, repr=False, compare=False)
    _status_codes: NDArray[np.int8] | None = field(default=None, repr=False, compare=False)

    def _row_df(self) -> NDArray[np.float64]:
        return self.df_error[:, None]

    @_screen_doc
    def adjusted(self, method: str | None = "benjamini-hochberg") -> NDArray[np.float64]:
        """The F p-values adjusted across responses (NaN where there is no test).

        Parameters
        ----------
        method : str or None
            ``"benjamini-hochberg"`` (``"bh"``), ``"benjamini-yekutieli"`` (``"by"``), or any
            method of :func:`lincomb.multiplicity.adjust_pvalues`; ``None`` for none.

        Examples
        --------
        %(marker_screen)s
        >>> adj = res.adjusted("benjamini-hochberg")
        >>> markers[int(adj.argmin())], bool((adj >= res.p).all())
        ('g0004', True)
        """
        return fdr_adjust(self.p, method)[0]

    @_screen_doc
    def intervals(self, level: float = 0.95) -> pd.DataFrame:
        """Marginal intervals for each row's ``Cβ`` per response (tidy).

        Columns: ``response, restriction, lower, upper, level``.

        Examples
        --------
        %(marker_screen)s
        >>> res.intervals(0.9).shape
        (18, 5)
        """
        rows = self._row_frame(level)
        return rows[["response", "restriction", "lower", "upper", "level"]]

    def _groups(self) -> _Groups:
        r, m = self.estimate.shape
        role = roles(m, self.redundant)
        return _Groups(
            key="response",
            keys=list(self.responses),
            labels=[tuple(self.labels)] * r,
            estimate=self.estimate,
            target=np.broadcast_to(self.target, (r, m)),
            se=self.se,
            ratio=self.ratio,
            stat=self.stat,
            df_test=np.full(r, self.df_test),
            df_error=self.df_error,
            p=self.p,
            role=np.broadcast_to(role, (r, m)),
            status=list(self.status),
            redundant_rows=np.full(r, len(self.redundant)),
        )

    @_screen_doc
    def test_frame(self, fdr: str | None = "benjamini-hochberg") -> pd.DataFrame:
        """One row per response; columns :data:`SCREEN_COLUMNS`.

        ``response``, the columns of :meth:`WaldTest.test_frame
        <lincomb.WaldTest.test_frame>`, then ``p_adjusted`` (``p`` adjusted across the
        responses with ``fdr``, named in ``adjustment``; responses without a test, status other
        than ``"ok"``, are left out of the family and get NaN) and ``n_obs``.

        Examples
        --------
        %(marker_screen)s
        >>> screen = res.test_frame(fdr="holm")
        >>> screen.shape, screen["adjustment"].iloc[0]
        ((6, 15), 'holm')
        """
        adj, name = fdr_adjust(self.p, fdr)
        r, m = self.estimate.shape
        if r == 0:
            out = self._test_frame()
            out["status"] = pd.Categorical(self.status, categories=STATUSES)
            out["p_adjusted"] = adj
            out["adjustment"] = _repeat(name, r)
            out["n_obs"] = self.n_obs
            return out
        # built column by column in the layout of the shared test frame (``_test_frame``),
        # without converting r strings per column
        cols = {
            "response": self._responses_array(),
            "restrictions": _repeat(" & ".join(self.labels), r),
            "rows": np.full(r, m),
            "rank": np.full(r, self.df_test),
            "stat": self.stat,
            "reference": _repeat(self.reference, r),
            "df_test": np.full(r, self.df_test),
            "df_error": np.asarray(self.df_error, dtype=np.float64),
            "p": self.p,
            "covariance": _repeat(self.covariance, r),
            "redundant_rows": np.full(r, len(self.redundant)),
            "status": self._status_categorical(),
            "p_adjusted": adj,
            "adjustment": _repeat(name, r),
            "n_obs": self.n_obs,
        }
        return pd.DataFrame(cols, index=pd.RangeIndex(r))

    def _responses_array(self) -> object:
        if self._response_index is not None and len(self._response_index) == len(self.responses):
            return self._response_index.array
        return list(self.responses)

    def _status_categorical(self) -> pd.Categorical[str]:
        if self._status_codes is not None:
            return from_codes(self._status_codes, STATUSES)
        return pd.Categorical(self.status, categories=STATUSES)

    @_screen_doc
    def row_frame(
        self, level: float = 0.95, fdr: str | None = "benjamini-hochberg"
    ) -> pd.DataFrame:
        """One row per response × restriction row; columns :data:`SCREEN_ROW_COLUMNS`.

        ``response``, the columns of :meth:`WaldTest.row_frame <lincomb.WaldTest.row_frame>`,
        then ``p_adjusted`` (each row's p adjusted across the responses, one family per
        restriction row), ``adjustment`` and ``n_obs``.

        Examples
        --------
        %(marker_screen)s
        >>> rows = res.row_frame(level=0.9)
        >>> rows.shape, rows["restriction"].iloc[0]
        ((18, 19), 'treatment[T.low] = 0')
        """
        out = self._row_frame(level)
        r, m = self.estimate.shape
        pr = self.row_p
        adj = np.empty_like(pr)
        name = "none"
        for i in range(m):
            adj[:, i], name = fdr_adjust(pr[:, i], fdr)
        for col in ("reference", "covariance"):
            out[col] = _repeat(self.reference if col == "reference" else self.covariance, r * m)
        codes = self._status_categorical().codes
        out["status"] = from_codes(np.repeat(codes, m), STATUSES)
        out["p_adjusted"] = adj.ravel()
        out["adjustment"] = _repeat(name, r * m)
        out["n_obs"] = np.repeat(self.n_obs, m)
        return out

    def _summary_rows(self, top: int = 10) -> tuple[str, list[str], list[list[str]]]:
        adj = self.adjusted("benjamini-hochberg")
        ok = np.isfinite(self.p)
        head = (
            f"ManyWaldTest (F, classical): {' & '.join(self.labels)}\n"
            f"{len(self.responses)} responses, {int(ok.sum())} tested; df_test = {self.df_test};"
            f" p < 0.05: {int(np.sum(self.p[ok] < 0.05))};"
            f" BH-adjusted p < 0.05: {int(np.sum(adj[ok] < 0.05))}"
        )
        order = np.argsort(np.where(ok, self.p, np.inf), kind="stable")[:top]
        rows = [
            [
                self.responses[i],
                _num(self.stat[i]),
                _num(self.df_error[i]),
                _p(self.p[i]),
                _p(adj[i]),
                self.status[i],
            ]
            for i in order
        ]
        return head, ["response", "F", "df_error", "p", "adjusted p (BH)", "status"], rows

    def __repr__(self) -> str:
        head, cols, rows = self._summary_rows()
        return f"{head}\nsmallest p-values:\n{_table_text(cols, rows)}"

    def _repr_html_(self) -> str:
        head, cols, rows = self._summary_rows()
        body = _html_lines(head)
        return f"<div class='lincomb'><p>{body}</p>{_table_html(cols, rows)}</div>"
