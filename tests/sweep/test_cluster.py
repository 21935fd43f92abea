"""`sweep --cluster`: a real Dask `LocalCluster` with worker processes on 127.0.0.1
gives the same results as the local run with the same seed."""
from __future__ import annotations

import pytest

from loopwise.sweep import SweepOptions, sweep_paths
from tests.scenarios import DELAYED_CROSSING

distributed = pytest.importorskip("distributed")

#: unstable in a corner of the box: the comparison covers the search and the bisection
MODEL = DELAYED_CROSSING


def test_a_local_dask_cluster_gives_the_local_results(tmp_path):
    path = tmp_path / "delayed.loop"
    path.write_text(MODEL)
    options = SweepOptions(samples=5, seed=11)
    local = sweep_paths([path], options=options, jobs=1).to_dict()
    with distributed.LocalCluster(n_workers=2, threads_per_worker=1, processes=True, host="127.0.0.1",
                                  dashboard_address=":0") as cluster:  # any free port: runs side by side
        # the workers are separate processes: prove it before trusting the comparison
        with distributed.Client(cluster) as client:
            pids = set(client.run(lambda: __import__("os").getpid()).values())
        assert len(pids) == 2 and __import__("os").getpid() not in pids
        remote = sweep_paths([path], options=options, cluster=cluster.scheduler_address).to_dict()
    assert remote == local
    (b,) = local["models"][0]["breaks"]
    assert b["unstable_samples"] > 0 and b["boundaries"]  # the comparison covers search and bisection
