"""The fits this layer's examples start from, written once.

Each set-up is a :func:`~lincomb._docstrings.fill_doc` fragment: a docstring writes
``%(lines_fit)s`` or ``%(sites_fit)s`` on a line of its own, and the decorator below fills in
the lines that import lincomb and fit the bundled data.
"""

from __future__ import annotations

from lincomb._docstrings import fill_doc

__all__ = ["LINES_FIT", "SITES_FIT", "lines_doc", "sites_doc"]

#: A fit of the filling lines (rows independent, 300 of them): the set-up of the examples of
#: the classical, HC and given covariances.
LINES_FIT = """\
>>> import lincomb as lc
>>> f = lc.fit("fill_g ~ line + temperature_c", lc.datasets.fill_lines())"""

#: A fit of the service sites (40 sites, 26 weeks each): the set-up of the examples of the
#: cluster-robust, panel and bootstrap estimators.
SITES_FIT = """\
>>> import lincomb as lc
>>> f = lc.fit("wait_min ~ staffing + protocol", lc.datasets.service_sites())"""

lines_doc = fill_doc(lines_fit=LINES_FIT)
sites_doc = fill_doc(sites_fit=SITES_FIT)
