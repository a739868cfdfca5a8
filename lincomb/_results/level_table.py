"""Tables of level means: the mean response at each level (or level combination) of factors.

Each mean is a linear combination ``l·β`` whose row ``l`` is the fit's own formula encoder
evaluated at the level (:meth:`~lincomb._model.encoder.FormulaEncoder.encode_grid`, as the
level-mean contrasts of :mod:`lincomb._builder.contrasts` do), averaged over a setting of the
other variables:

* variables given in ``holding`` are fixed (a level of a factor, or a number);
* numeric covariates otherwise sit at their mean over the fit's rows (``covariates="mean"``;
  the mean of the variable is put through the formula, so ``x²`` is evaluated at ``x̄``), or the
  mean is averaged over the fit's rows (``covariates="rows"``: every row's own values of all
  other variables, factors included, with the table's factors set to the level);
* other factors are averaged over their level combinations with equal weights
  (``weighting="equal"``) or with the frequencies of those combinations among the fit's rows
  (``weighting="observed"``).

The table gives intervals and no test.  Differences between the means (all pairs, or each
against a reference level) and a trend across numeric levels are returned as
:class:`~lincomb.WaldTest` results, so the library's multiplicity adjustments
(:meth:`~lincomb.WaldTest.adjust`) and simultaneous intervals
(:meth:`~lincomb.WaldTest.simultaneous`) apply to them.  A mean that a rank-deficient fit
cannot identify is flagged in the ``estimable`` column, not reported.
"""

from __future__ import annotations

import itertools
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field
from typing import TYPE_CHECKING, Any

import numpy as np
import pandas as pd
from numpy.typing import NDArray

from lincomb._builder.level_rows import find_factor, level_index, model_variables
from lincomb._builder.polynomials import orthogonal_polynomials
from lincomb._builder.recipes import DEGREE_NAMES
from lincomb._builder.restriction import _is_number, from_matrix
from lincomb._covariance.reference import check_reference
from lincomb._docstrings import fill_lines_doc
from lincomb._results.expected import MeanIntervals, reference_fields, row_moments
from lincomb._results.format import TableRepr, _num
from lincomb._typing import Array
from lincomb.errors import ContrastError, LincombError, UnknownCoefficientError

if TYPE_CHECKING:  # pragma: no cover
    from lincomb._fit.linear import LinearFit
    from lincomb._results.wald import WaldTest

__all__ = ["LevelMeanTable", "level_mean_table", "readable"]


def readable(value: Any) -> str:
    """A value as a label shows it: numbers to 4 significant digits (``55.42``, not
    ``55.41573426573427``), everything else as text.

    Examples
    --------
    >>> readable(55.41573426573427), readable(160.0), readable("late")
    ('55.42', '160', 'late')
    """
    if _is_number(value):
        return f"{float(value):.4g}"
    return str(value)


@dataclass(frozen=True, repr=False)
class LevelMeanTable(MeanIntervals, TableRepr):
    """Mean response at each level (combination) of one or more factors, with intervals.

    Made by :meth:`LinearFit.level_means <lincomb.LinearFit.level_means>`; the setting of the
    other variables is described in :mod:`lincomb._results.level_table` and in ``setting``.

    Attributes
    ----------
    factors : tuple of str
        The factors, as named in the call.
    cells : tuple of tuple of str
        The level (combination) of each row.
    labels : tuple of str
        ``factor=level`` labels, joined by a comma and a space for combinations.
    estimate, se : (k,) ndarray
        The means and their standard errors (NaN where not estimable).
    estimable : (k,) ndarray of bool
    df_error : float
        Degrees of freedom of the t reference (``inf``: normal).
    reference : {'F', 'chi2'}
    covariance : str
    setting : str
        Where the other variables were held, in words (numbers readable).

    Examples
    --------
    >>> import lincomb as lc
    >>> f = lc.fit("fill_g ~ line + shift + temperature_c", lc.datasets.fill_lines())
    >>> tab = f.level_means("line")
    >>> tab.labels[:2], tab.setting
    (('line=L1', 'line=L2'), 'temperature_c=21.02 (mean); averaged over shift (equal weights)')
    """

    factors: tuple[str, ...]
    cells: tuple[tuple[str, ...], ...]
    labels: tuple[str, ...]
    estimate: Array
    se: Array
    estimable: NDArray[np.bool_]
    df_error: float
    reference: str
    covariance: str
    setting: str
    _rows: Array | None = field(repr=False, compare=False, default=None)
    _fit: Any = field(repr=False, compare=False, default=None)
    _vcov: Any = field(repr=False, compare=False, default=None)

    @fill_lines_doc
    def row_frame(self, level: float = 0.95) -> pd.DataFrame:
        """One row per level (combination): the mean and its confidence interval.

        Parameters
        ----------
        level : float, default 0.95

        Returns
        -------
        pandas.DataFrame
            One column per factor (its level), then ``label, estimate, se, lower, upper,
            level, estimable, df_error, covariance``.

        Examples
        --------
        %(fill_lines_fit)s
        >>> f.level_means("line").row_frame()[["line", "label"]].iloc[0].tolist()
        ['L1', 'line=L1']
        """
        q = self._quantile(level)
        out = pd.DataFrame({f: [c[i] for c in self.cells] for i, f in enumerate(self.factors)})
        out["label"] = list(self.labels)
        out["estimate"] = self.estimate
        out["se"] = self.se
        out["lower"] = self.estimate - q * self.se
        out["upper"] = self.estimate + q * self.se
        out["level"] = level
        out["estimable"] = self.estimable
        out["df_error"] = self.df_error
        out["covariance"] = self.covariance
        return out

    # -- comparisons -------------------------------------------------------------------
    def _test(self, w: Array, labels: list[str]) -> WaldTest:
        assert self._rows is not None
        c = w @ self._rows
        return self._fit.wald(  # type: ignore[no-any-return]
            from_matrix(c, labels=labels), covariance=self._vcov, reference=self.reference
        )

    def differences(self, versus: object = None) -> WaldTest:
        """Differences between the means: all pairs, or each against a reference.

        Parameters
        ----------
        versus : level, tuple of levels, or label, optional
            The reference mean (a level of a one-factor table, a tuple of levels or a label
            such as ``"line=L2"``).  Default: all ``k(k − 1)/2`` pairs.

        Returns
        -------
        WaldTest
            One row per difference (its estimate, ``se``, t and interval); adjust them for
            multiplicity with ``.adjust(method)`` or get simultaneous intervals with
            ``.simultaneous(method, level)``.

        Raises
        ------
        NotEstimableError
            A difference involves a mean the fit cannot identify.

        Examples
        --------
        >>> import lincomb as lc
        >>> f = lc.fit("fill_g ~ line + shift", lc.datasets.fill_lines())
        >>> diffs = f.level_means("line").differences(versus="L1")
        >>> diffs.labels[0]
        'line=L2 - line=L1'
        >>> holm = diffs.adjust("holm")
        >>> bool((holm.p_adjusted >= holm.p).all())
        True
        """
        k = len(self.labels)
        if k < 2:
            raise ContrastError("the table has a single mean; nothing to compare.")
        eye = np.eye(k)
        rows: list[Array] = []
        labels: list[str] = []
        if versus is None:
            for i, j in itertools.combinations(range(k), 2):
                rows.append(eye[j] - eye[i])
                labels.append(f"{self.labels[j]} - {self.labels[i]}")
        else:
            r = self._find_cell(versus)
            for i in range(k):
                if i != r:
                    rows.append(eye[i] - eye[r])
                    labels.append(f"{self.labels[i]} - {self.labels[r]}")
        return self._test(np.array(rows), labels)

    def _find_cell(self, key: Any) -> int:
        if isinstance(key, str) and key in self.labels:
            return self.labels.index(key)
        want = key if isinstance(key, tuple) else (key,)
        for i, cell in enumerate(self.cells):
            if len(want) == len(cell) and all(
                level_index(v, (c,)) == 0 for v, c in zip(want, cell, strict=True)
            ):
                return i
        raise UnknownCoefficientError(
            f"{key!r} is not a row of this table; rows: {list(self.labels)}."
        )

    def trend(self, values: Sequence[float] | None = None, degree: int | None = None) -> WaldTest:
        """A linear slope across ordered numeric levels, beside the orthogonal-polynomial parts.

        Parameters
        ----------
        values : sequence of float, optional
            The level values in row order; default the levels read as numbers.
        degree : int, optional
            Highest polynomial degree (default ``k − 1``).

        Returns
        -------
        WaldTest
            First row: the least-squares slope of the means on the level values, per unit of
            the values (``Σ (v − v̄) μ / Σ (v − v̄)²``); then one row per orthonormal
            polynomial component (:func:`~lincomb._builder.polynomials.orthogonal_polynomials`,
            as ``lc.levels(...).trend(...)``).  The slope row is proportional to the linear
            component, so the joint test counts it once (it is reported as redundant).

        Examples
        --------
        >>> import lincomb as lc
        >>> f = lc.fit("yield_t_ha ~ C(nitrogen) + variety", lc.datasets.field_trial())
        >>> tr = f.level_means("C(nitrogen)").trend(degree=2)
        >>> tr.labels[0], tr.labels[2]
        ('slope per unit of C(nitrogen)', 'C(nitrogen) trend: quadratic')
        """
        if len(self.factors) != 1:
            raise ContrastError(
                "a trend runs across the levels of one factor; this table has"
                f" {len(self.factors)} ({list(self.factors)}). Make a table of one factor."
            )
        name = self.factors[0]
        if values is None:
            try:
                v = np.array([float(c[0]) for c in self.cells])
            except ValueError:
                raise ContrastError(
                    f"the levels of {name!r} ({[c[0] for c in self.cells]}) are not numbers;"
                    " give their positions with values=[...]."
                ) from None
        else:
            v = np.asarray(values, dtype=np.float64).reshape(-1)
            if v.size != len(self.cells):
                raise ContrastError(
                    f"{v.size} values for the {len(self.cells)} levels of {name!r}."
                )
        if not np.all(np.isfinite(v)) or np.ptp(v) == 0:
            raise ContrastError(f"trend values must be finite and not all equal; got {v.tolist()}.")
        dv = v - v.mean()
        slope = dv / float(dv @ dv)
        poly = orthogonal_polynomials(v, degree)
        rows = np.vstack([slope, poly])
        labels = [f"slope per unit of {name}"] + [
            f"{name} trend: {DEGREE_NAMES.get(d + 1, f'degree {d + 1}')}"
            for d in range(poly.shape[0])
        ]
        return self._test(rows, labels)

    # -- presentation ------------------------------------------------------------------
    def _parts(self) -> tuple[str, list[str], list[list[str]], str]:
        fr = self.row_frame()
        ref = f"t, {self.df_error:g} df" if np.isfinite(self.df_error) else "normal"
        head = f"Level means of {', '.join(self.factors)} ({self.covariance} covariance, {ref})"
        if self.setting:
            head += f"\nother variables: {self.setting}"
        header = ["level", "mean", "s.e.", "95% low", "95% high"]
        vals = fr[["estimate", "se", "lower", "upper"]].to_numpy(dtype=np.float64)
        rows = [
            [lab, *(_num(x) for x in v)] if ok else [lab, "not estimable", "", "", ""]
            for lab, v, ok in zip(self.labels, vals, self.estimable, strict=True)
        ]
        return head, header, rows, ""


def _encode(fit: LinearFit, frame: pd.DataFrame) -> Array:
    """Full model rows (fit column order) of ``frame`` through the fit's encoder."""
    encoder = fit.design.encoder
    assert encoder is not None  # checked by the caller
    try:
        grid, names = encoder.encode_grid(frame, None, "for the level means")
    except LincombError as exc:
        raise ContrastError(str(exc)) from None
    out = np.zeros((grid.shape[0], len(fit.names)))
    for j, name in enumerate(names):
        out[:, fit.names.index(str(name))] = grid[:, j]
    return out


@fill_lines_doc
def level_mean_table(
    fit: LinearFit,
    factors: str | Sequence[str],
    *,
    holding: Mapping[str, Any] | None,
    covariates: str,
    weighting: str,
    covariance: object,
    reference: str,
) -> LevelMeanTable:
    """The computation behind :meth:`LinearFit.level_means`, which documents the arguments and
    holds their defaults.

    Examples
    --------
    %(fill_lines_fit)s
    >>> options = {"covariates": "mean", "weighting": "equal", "covariance": None}
    >>> level_mean_table(f, "line", holding=None, reference="F", **options).estimate.shape
    (4,)
    """
    encoder = fit.design.encoder
    if encoder is None:
        raise ContrastError(
            "level means need a fit made from a formula (lc.fit); this fit has no factors."
        )
    if covariates not in ("mean", "rows"):
        raise ContrastError(f"covariates must be 'mean' or 'rows', got {covariates!r}.")
    if weighting not in ("equal", "observed"):
        raise ContrastError(f"weighting must be 'equal' or 'observed', got {weighting!r}.")
    ref = check_reference(reference)
    vcov = fit.evaluate_covariance(covariance)
    names = [factors] if isinstance(factors, str) else list(factors)
    if not names:
        raise ContrastError("name at least one factor.")
    facs = [find_factor(encoder, n, None) for n in names]
    targets = [f.variable for f in facs]
    if len(set(targets)) != len(targets):
        raise ContrastError(f"a factor is named twice: {names}.")
    cats = encoder.categoricals()
    model_vars = model_variables(encoder)
    held: dict[str, Any] = {}
    for key, val in dict(holding or {}).items():
        if key not in model_vars:
            raise ContrastError(
                f"{key!r} is not a variable of this model; its variables: {sorted(model_vars)}."
            )
        if key in targets:
            raise ContrastError(f"{key!r} is a factor of the table; it cannot also be held.")
        if key in cats:
            levs = cats[key][0][1]
            i = level_index(val, levs)
            if i is None:
                raise UnknownCoefficientError(
                    f"{key}={val!r} is not a level of {key!r}; levels: {[str(x) for x in levs]}."
                )
            held[key] = levs[i]
        else:
            if not _is_number(val) or not np.isfinite(float(val)):
                raise ContrastError(f"{key} is numeric in this model; give a finite number.")
            held[key] = float(val)
    others_cat = sorted(v for v in model_vars if v in cats and v not in targets and v not in held)
    others_num = sorted(
        v for v in model_vars if v not in cats and v not in targets and v not in held
    )
    cells = list(itertools.product(*(f.levels for f in facs)))
    k = len(cells)
    setting_parts = [f"{v}={readable(x)}" for v, x in held.items()]
    if covariates == "rows" or weighting == "observed" or others_num:
        frame_or_none = fit.design.source  # raises for a fit without rows
        if frame_or_none is None:
            raise ContrastError("this fit keeps no data frame to average over.")
        source: pd.DataFrame = frame_or_none
    if covariates == "rows":
        base = source[sorted(model_vars)].copy()
        for v, x in held.items():
            base[v] = x
        n = len(base)
        rows_l = np.zeros((k, len(fit.names)))
        for i, cell in enumerate(cells):
            frame = base.copy()
            for t, lev in zip(targets, cell, strict=True):
                frame[t] = pd.Series([lev] * n, index=frame.index, dtype=object)
            rows_l[i] = _encode(fit, frame).mean(axis=0)
        rest = [v for v in sorted(model_vars) if v not in targets and v not in held]
        if rest:
            setting_parts.append(f"averaged over the fit's {n} rows ({', '.join(rest)})")
    else:
        fixed: dict[str, Any] = dict(held)
        for v in others_num:
            fixed[v] = float(np.mean(source[v].to_numpy(dtype=np.float64)))
            setting_parts.append(f"{v}={readable(fixed[v])} (mean)")
        if others_cat:
            if weighting == "equal":
                combos = list(itertools.product(*(cats[v][0][1] for v in others_cat)))
                omega = np.full(len(combos), 1.0 / len(combos))
            else:
                counts = source.groupby(others_cat, observed=True).size()
                combos = [c if isinstance(c, tuple) else (c,) for c in counts.index]
                omega = counts.to_numpy(dtype=np.float64) / counts.sum()
            setting_parts.append(f"averaged over {', '.join(others_cat)} ({weighting} weights)")
        else:
            combos, omega = [()], np.ones(1)
        g = len(combos)
        frame = pd.DataFrame(
            {
                t: pd.Series([cell[j] for cell in cells for _ in range(g)], dtype=object)
                for j, t in enumerate(targets)
            }
        )
        for j, v in enumerate(others_cat):
            frame[v] = pd.Series([c[j] for _ in range(k) for c in combos], dtype=object)
        for v, x in fixed.items():
            frame[v] = [x] * (k * g)
        grid = _encode(fit, frame).reshape(k, g, -1)
        rows_l = np.einsum("kgp,g->kp", grid, omega)
    est, se, ok = row_moments(fit, rows_l, vcov)
    labels = tuple(
        ", ".join(f"{f.name}={readable(lev)}" for f, lev in zip(facs, cell, strict=True))
        for cell in cells
    )
    return LevelMeanTable(
        factors=tuple(names),
        cells=tuple(tuple(readable(x) for x in c) for c in cells),
        labels=labels,
        estimate=est,
        se=se,
        estimable=ok,
        setting="; ".join(setting_parts),
        **reference_fields(vcov, ref),
        _rows=rows_l,
        _fit=fit,
        _vcov=vcov,
    )
