"""Where a sweep's batches of plants are evaluated: in this process, in local worker
processes (`--jobs`), or on a Dask distributed cluster (`--cluster ADDRESS`).

Each is a context manager yielding `run(model, names, values, fixed) -> outcomes`
(the arguments of `evaluate.evaluate_points`). The plants are cut into the engine's
batches (`evaluate.batches`: the cut depends on the number of plants, never on the
number of workers), each batch goes to one worker whole, and the outcomes come back
in the order of `values`, so the results do not depend on where or on how many
workers they were computed: a sweep with the same seed gives the same figures on one
process, many processes or a cluster.
"""
from __future__ import annotations

from contextlib import contextmanager

import numpy as np

from ..errors import UsageError
from .evaluate import SampleOutcome, batches, evaluate_points

__all__ = ["local_batches", "cluster_batches", "CLUSTER_INSTALL"]

CLUSTER_INSTALL = 'pip install "loopwise[cluster]"'


def _chunks(values: np.ndarray) -> list[np.ndarray]:
    """The engine's batches of `values` (rows), the same for any number of workers."""
    return [values[idx] for idx in batches(len(values))]


def _lost(chunk: np.ndarray) -> list[SampleOutcome]:
    """The outcomes of a chunk whose worker process died (out of memory, killed)."""
    return [SampleOutcome(error=("LW900", "the worker process analysing this plant stopped "
                                          "(try --jobs 1; the model may need more memory)"))] * len(chunk)


@contextmanager
def local_batches(jobs: int):
    """Local processes: the shared pool (`loopwise.pool.open_pool`), kept for every batch
    of the sweep; Ctrl-C and SIGTERM end its workers (the command exits 130 / 143)."""
    from functools import partial

    from ..pool import open_pool

    if jobs != 1:
        from .. import analysis  # noqa: F401  (loaded once here; forked workers inherit it)
    with open_pool(jobs) as pool:

        def run(model, names, values, fixed):
            chunks = _chunks(values)
            parts = pool.run(partial(evaluate_points, model, names, fixed=fixed), chunks, on_broken=_lost)
            return [o for part in parts for o in part]

        yield run


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
        def run(model, names, values, fixed):
            chunks = _chunks(values)
            futures = client.map(evaluate_points, [model] * len(chunks), [tuple(names)] * len(chunks), chunks,
                                 [fixed] * len(chunks), pure=False)
            return [o for part in client.gather(futures) for o in part]

        yield run
    finally:
        client.close()
