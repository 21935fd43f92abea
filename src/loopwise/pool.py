"""One process pool for every command that works in parallel (check, diff, report, sweep).

`run_pool(work, items, jobs)` returns `[work(item) for item in items]`, in the
order of `items` whatever the number of processes, and keeps these promises:

- **Largest first.** With a `cost` function the costliest items start first, so a
  big item does not start last and leave the other workers idle.
- **No stray workers.** Ctrl-C (SIGINT) or SIGTERM to the command ends every
  worker before the command exits: items not started are cancelled, items in
  flight are stopped. On Linux a worker also ends if the command itself is
  killed outright (SIGKILL), through the kernel's parent-death signal.
- **No traceback.** Workers ignore SIGINT (a terminal sends it to the whole
  process group; the command handles it once), and a second Ctrl-C while the
  pool is being stopped is ignored. The command sees `KeyboardInterrupt`
  (Ctrl-C) or `Terminated` (SIGTERM); `loopwise.cli.main` turns them into exit
  codes 130 and 143.
- **Capped.** No more processes than CPUs this process may run on, nor than items
  (`worker_count`).

`work` and the items must pickle (a top-level function, or a `functools.partial`
of one, and plain data). With one worker everything runs in this process, with
the same ordering of results and the same `tick` calls. Work that comes in
rounds (a sweep's batches) keeps its workers with `open_pool(jobs)` and calls
`pool.run(...)` once per round, under the same promises.

Only the standard library is imported here; `concurrent.futures` loads when a
pool is really started.
"""
from __future__ import annotations

import os
import signal
import threading
from contextlib import contextmanager
from typing import Callable, Iterable, Iterator, Sequence, TypeVar

__all__ = ["Terminated", "cpu_limit", "worker_count", "run_pool", "Pool", "open_pool", "sigterm_raises",
           "JOBS_HELP"]

T = TypeVar("T")
R = TypeVar("R")

#: the words every command's --jobs help uses (`{default}`: the command's default)
JOBS_HELP = ("in N processes (0: one per CPU; default {default}; capped at the number of CPUs "
             "this process may use)")

_STOP_SIGNALS = (signal.SIGINT, signal.SIGTERM)
#: seconds to wait for a terminated worker before killing it
_GRACE_S = 5.0


class Terminated(KeyboardInterrupt):
    """SIGTERM reached the command while a pool was running; the workers are gone.

    A KeyboardInterrupt, so code that cleans up after Ctrl-C also cleans up after it."""


def cpu_limit() -> int:
    """How many CPUs this process may run on (its affinity mask, e.g. in a container)."""
    try:
        return max(1, len(os.sched_getaffinity(0)))
    except (AttributeError, OSError):
        return max(1, os.cpu_count() or 1)


def worker_count(jobs: int, items: int) -> int:
    """Processes to use for `items` pieces of work when `jobs` were asked for
    (0: one per CPU); never more than the CPUs or the items, never fewer than 1."""
    wanted = cpu_limit() if jobs == 0 else jobs
    return max(1, min(wanted, cpu_limit(), items))


def run_pool(work: Callable[[T], R], items: Sequence[T], jobs: int = 1, *,
             cost: Callable[[T], float] | None = None,
             tick: Callable[[], None] | None = None,
             on_broken: Callable[[T], R] | None = None) -> list[R]:
    """`[work(item) for item in items]`, in `jobs` processes when more than one.

    `cost(item)` orders the work largest first (results keep the order of
    `items`). `tick()` is called once per finished item, in this process.
    `on_broken(item)` gives the result for an item whose worker process died
    (out of memory, killed); without it that failure is raised.
    """
    with open_pool(worker_count(jobs, len(items))) as pool:
        return pool.run(work, items, cost=cost, tick=tick, on_broken=on_broken)


class Pool:
    """Worker processes kept for several rounds of work (`open_pool`), such as a
    sweep's batches of plants, so that each round does not start its workers anew.
    `run` keeps every promise of `run_pool`; with one worker it runs in this process."""

    def __init__(self, workers: int):
        self.workers = workers
        self._executor = None

    def run(self, work: Callable[[T], R], items: Sequence[T], *,
            cost: Callable[[T], float] | None = None,
            tick: Callable[[], None] | None = None,
            on_broken: Callable[[T], R] | None = None) -> list[R]:
        """`[work(item) for item in items]` on this pool's workers (see `run_pool`)."""
        tick = tick or (lambda: None)
        if self.workers <= 1 or len(items) <= 1:
            out = []
            for item in items:
                out.append(work(item))
                tick()
            return out
        order = list(range(len(items)))
        if cost is not None:
            order.sort(key=lambda i: -cost(items[i]))
        return self._parallel(work, items, order, tick, on_broken)

    def _start(self):
        if self._executor is None:
            import multiprocessing
            from concurrent.futures import ProcessPoolExecutor

            # forked workers are this process's children; other start methods fork them
            # from a server process, so there is no parent to watch for
            forked = multiprocessing.get_start_method() == "fork"
            self._executor = ProcessPoolExecutor(max_workers=self.workers, initializer=_worker_start,
                                                 initargs=(os.getpid() if forked else None,))
        return self._executor

    def _parallel(self, work, items, order, tick, on_broken) -> list:
        from concurrent.futures import as_completed
        from concurrent.futures.process import BrokenProcessPool

        out: list = [None] * len(items)
        pool = self._start()
        broken = False
        # the workers are forked while SIGINT and SIGTERM are blocked, so none
        # can catch one before `_worker_start` has set its own handling
        with _blocked(_STOP_SIGNALS):
            futures = {pool.submit(work, items[i]): i for i in order}
        for fut in as_completed(futures):
            i = futures[fut]
            try:
                out[i] = fut.result()
            except BrokenProcessPool:
                if on_broken is None:
                    raise
                broken = True
                out[i] = on_broken(items[i])
            tick()
        if broken:  # a broken executor takes no more work: the next round starts new workers
            self.close()
        return out

    def close(self) -> None:
        """Let the workers finish and end them (the next `map` starts new ones)."""
        if self._executor is not None:
            self._executor.shutdown(wait=True)
            self._executor = None

    def stop(self) -> None:
        """End every worker now (Ctrl-C, SIGTERM, an error)."""
        if self._executor is not None:
            _stop(self._executor)
            self._executor = None


@contextmanager
def open_pool(jobs: int) -> Iterator[Pool]:
    """A `Pool` of `jobs` workers (0: one per CPU; capped at the CPUs) for several rounds
    of `pool.run(...)`; SIGTERM raises `Terminated` inside, and on any exception (Ctrl-C
    and SIGTERM included) every worker is ended before it leaves the block."""
    pool = Pool(worker_count(jobs, cpu_limit()))
    with sigterm_raises():
        try:
            yield pool
        except BaseException:
            pool.stop()
            raise
        pool.close()


# --- the parallel run ---------------------------------------------------------------

def _stop(pool) -> None:
    """End every worker now: cancel what has not started, terminate what runs."""
    with _ignored(_STOP_SIGNALS):  # a second Ctrl-C must not interrupt the cleanup
        processes = list((getattr(pool, "_processes", None) or {}).values())
        for process in processes:
            if process.is_alive():
                process.terminate()
        for process in processes:
            process.join(_GRACE_S)
            if process.is_alive():
                process.kill()
                process.join()
        # Every worker is gone. One ended while sending its result leaves the pool's
        # manager thread reading the rest of that message from a pipe whose only other
        # write end is this process's own: the read would never end, nor the shutdown
        # that joins the thread (nor the interpreter's exit). Closing that end makes
        # the read see end-of-file; the thread then marks the pool broken and stops.
        queue = getattr(pool, "_result_queue", None)
        writer = getattr(queue, "_writer", None)
        if writer is not None:
            try:
                writer.close()
            except OSError:
                pass
        pool.shutdown(wait=True, cancel_futures=True)


def _worker_start(parent: int | None) -> None:
    """In each worker: Ctrl-C is the command's to handle; SIGTERM ends the worker;
    a forked worker ends with the command even if the command is killed outright."""
    signal.signal(signal.SIGINT, signal.SIG_IGN)
    signal.signal(signal.SIGTERM, signal.SIG_DFL)
    if parent is not None:
        _die_with_parent()
    if hasattr(signal, "pthread_sigmask"):
        signal.pthread_sigmask(signal.SIG_UNBLOCK, _STOP_SIGNALS)
    if parent is not None and os.getppid() != parent:
        os._exit(1)  # the command died before the parent-death signal was set


def _die_with_parent() -> None:
    """Linux: ask the kernel to send SIGTERM to this worker when its parent dies."""
    try:
        import ctypes

        libc = ctypes.CDLL(None, use_errno=True)
        pr_set_pdeathsig = 1
        libc.prctl(pr_set_pdeathsig, int(signal.SIGTERM), 0, 0, 0)
    except (OSError, AttributeError):
        pass  # not Linux: SIGINT and SIGTERM to the command still end the workers


# --- signal handling in the command's process -----------------------------------------

def _on_main_thread() -> bool:
    return threading.current_thread() is threading.main_thread()


def _raise_terminated(signum, frame):
    raise Terminated()


class sigterm_raises:
    """A context in which SIGTERM raises `Terminated` (as Ctrl-C raises
    KeyboardInterrupt), so cleanup runs: a pool stops its workers, an output
    being written removes its temporary file. Used around every pool, and by
    `loopwise.cli.main` around a whole command. Main thread only (elsewhere a
    no-op: Python runs signal handlers in the main thread)."""

    def __enter__(self):
        self.previous = None
        if _on_main_thread():
            self.previous = signal.signal(signal.SIGTERM, _raise_terminated)
        return self

    def __exit__(self, *exc):
        if self.previous is not None:
            signal.signal(signal.SIGTERM, self.previous)
        return False


class _ignored:
    """Ignore these signals for a moment (main thread only; elsewhere a no-op)."""

    def __init__(self, signals: Iterable[int]):
        self.signals = tuple(signals)

    def __enter__(self):
        self.previous = {}
        if _on_main_thread():
            self.previous = {s: signal.signal(s, signal.SIG_IGN) for s in self.signals}
        return self

    def __exit__(self, *exc):
        for s, handler in self.previous.items():
            signal.signal(s, handler)
        return False


class _blocked:
    """Hold these signals back for a moment (delivered when the block ends)."""

    def __init__(self, signals: Iterable[int]):
        self.signals = tuple(signals)

    def __enter__(self):
        self.previous = None
        if hasattr(signal, "pthread_sigmask"):
            self.previous = signal.pthread_sigmask(signal.SIG_BLOCK, self.signals)
        return self

    def __exit__(self, *exc):
        if self.previous is not None:
            signal.pthread_sigmask(signal.SIG_SETMASK, self.previous)
        return False
