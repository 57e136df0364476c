"""A study fitted on a (local) Dask cluster through joblib's Dask backend.

``fit_each`` and the shared fit's bootstrap hand their loops to joblib; under
``with joblib.parallel_backend("dask"):`` and a ``dask.distributed.Client`` the work runs on
the cluster with no other change. The reference for every check is the same call in one
process (n_jobs=1); the task stream of the scheduler shows that the cluster did the work.
Skipped when dask.distributed is not installed (the optional ``cluster`` extra). The data
are invented (seeded simulations).
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

distributed = pytest.importorskip("distributed")
joblib = pytest.importorskip("joblib")

import isoturnover as iso  # noqa: E402

TIMES = np.array([0.0, 2, 5, 9, 14, 21, 30, 45, 60, 80])


def _study(n=4, seed=11):
    """Invented animals, one tissue and isotope: one pool, half-life 10 to 16 d."""
    rng = np.random.default_rng(seed)
    rows = []
    for a in range(n):
        k = np.log(2) / (10.0 + 2.0 * a)
        d0, de = -24.0 + rng.normal(0, 0.4), -16.0 + rng.normal(0, 0.4)
        y = de + (d0 - de) * np.exp(-k * TIMES) + rng.normal(0, 0.25, TIMES.size)
        rows += [{"subject": f"A{a}", "tissue": "liver", "isotope": "d13C", "time": t,
                  "value": v, "group": "AB"[a % 2]} for t, v in zip(TIMES, y)]
    return pd.DataFrame(rows)


@pytest.fixture(scope="module")
def client():
    cluster = distributed.LocalCluster(n_workers=2, threads_per_worker=1, processes=True,
                                       dashboard_address=None)
    with distributed.Client(cluster) as c:
        yield c
    cluster.close()


def test_fit_each_on_a_dask_cluster_gives_the_one_process_table(client):
    df = _study()
    serial = iso.fit_each(df, pools=(1,), n_jobs=1)
    with distributed.get_task_stream(client) as stream:
        with joblib.parallel_backend("dask"):
            on_cluster = iso.fit_each(df, pools=(1,), n_jobs=-1)
    assert len(stream.data) > 0, "no task ran on the Dask cluster"
    assert list(on_cluster) == list(serial)
    pd.testing.assert_frame_equal(on_cluster.table(method="asymptotic"),
                                  serial.table(method="asymptotic"), check_exact=True)
    pd.testing.assert_frame_equal(on_cluster.half_lives(method="asymptotic"),
                                  serial.half_lives(method="asymptotic"), check_exact=True)


def test_shared_bootstrap_on_a_dask_cluster_gives_the_one_process_table(client):
    fit = iso.fit_shared(_study(n=6), shared=("k1",))
    serial = fit.bootstrap(n=12, rng=3, n_jobs=1)
    with distributed.get_task_stream(client) as stream:
        with joblib.parallel_backend("dask"):
            on_cluster = fit.bootstrap(n=12, rng=3, n_jobs=-1)
    assert len(stream.data) > 0, "no task ran on the Dask cluster"
    pd.testing.assert_frame_equal(on_cluster, serial, check_exact=True)
