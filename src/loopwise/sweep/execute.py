"""Where a sweep's batches of plants are evaluated: in this process, in local worker
processes (`--jobs`), or on a Dask distributed cluster (`--cluster ADDRESS`).

Each is a context manager yielding `run(model, names, values, fixed) -> outcomes`
(the arguments of `evaluate.evaluate_points`). A batch is cut into chunks and the
outcomes come back in the order of `values`, so the results do not depend on where
or in how many pieces they were computed: a sweep with the same seed gives the same
figures on one process, many processes or a cluster.
"""
from __future__ import annotations

from contextlib import contextmanager

import numpy as np

from ..errors import UsageError
from .evaluate import evaluate_points

__all__ = ["local_batches", "cluster_batches", "CLUSTER_INSTALL"]

CLUSTER_INSTALL = 'pip install "loopwise[cluster]"'
#: chunks per worker and batch: enough to even out slow plants, few enough to keep overhead low
CHUNKS_PER_WORKER = 4


def _chunks(values: np.ndarray, workers: int) -> list[np.ndarray]:
    return [c for c in np.array_split(values, min(len(values), workers * CHUNKS_PER_WORKER)) if len(c)]


def _serial(model, names, values, fixed):
    return evaluate_points(model, names, values, fixed)


@contextmanager
def local_batches(jobs: int):
    """Local processes. This is the one place a sweep starts a pool (to be replaced by
    the commands' shared pool helper): workers ignore Ctrl-C, which the parent handles
    by cancelling what has not started."""
    if jobs <= 1:
        yield _serial
        return
    from concurrent.futures import ProcessPoolExecutor

    from .. import analysis  # noqa: F401  (loaded once here; forked workers inherit it)
    from ..pool import _worker_start

    pool = ProcessPoolExecutor(max_workers=jobs, initializer=_worker_start, initargs=(None,))

    def run(model, names, values, fixed):
        futures = [pool.submit(evaluate_points, model, names, c, fixed) for c in _chunks(values, jobs)]
        return [o for f in futures for o in f.result()]

    try:
        yield run
    except BaseException:
        pool.shutdown(wait=True, cancel_futures=True)
        raise
    pool.shutdown(wait=True)


@contextmanager
def cluster_batches(address: str):
    """An existing Dask distributed scheduler at `address` (its workers need loopwise
    installed; they read no model files: the parsed model travels with each batch)."""
    try:
        from distributed import Client
    except ImportError:
        raise UsageError(f"--cluster needs Dask distributed, which is not installed: {CLUSTER_INSTALL}") from None
    try:
        client = Client(address, timeout="20s")
    except (OSError, TimeoutError, ValueError) as exc:
        raise UsageError(f"cannot reach the Dask scheduler at {address}: {exc}") from None
    try:
        workers = max(1, sum(client.nthreads().values()))

        def run(model, names, values, fixed):
            chunks = _chunks(values, workers)
            futures = client.map(evaluate_points, [model] * len(chunks), [tuple(names)] * len(chunks), chunks,
                                 [fixed] * len(chunks), pure=False)
            return [o for part in client.gather(futures) for o in part]

        yield run
    finally:
        client.close()
