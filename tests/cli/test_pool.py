"""The shared process pool (`loopwise.pool`) with real processes: ordering,
a dead worker, the --jobs cap, and signals (SIGTERM, Ctrl-C to the process
group, SIGKILL of the command) that must never leave a worker behind.

Workers are found through /proc (each worker's parent is the command); a worker
counts as gone when its /proc entry is gone or it is a zombie (dead, waiting
to be reaped). Linux only, like the CI.
"""
from __future__ import annotations

import os
import signal
import subprocess
import sys
import time
from pathlib import Path

import pytest

from loopwise.pool import cpu_limit, run_pool, worker_count

pytestmark = pytest.mark.skipif(not Path("/proc/self/stat").exists(), reason="needs Linux /proc")
#: the signal tests need a real pool, which needs two CPUs (jobs are capped at the CPUs)
needs_two_cpus = pytest.mark.skipif(cpu_limit() < 2, reason="a pool needs 2 CPUs here")

# --- the helper on its own ------------------------------------------------------------------


def _record_start(item):
    path, value = item
    with open(path, "a") as fh:
        fh.write(f"{value}\n")
    time.sleep(0.3)
    return value * 10


@needs_two_cpus
def test_results_keep_input_order_and_the_costliest_start_first(tmp_path):
    log = tmp_path / "started"
    values = [1, 5, 3, 9, 2, 7]
    items = [(str(log), v) for v in values]
    out = run_pool(_record_start, items, jobs=2, cost=lambda item: item[1])
    assert out == [v * 10 for v in values]
    started = [int(x) for x in log.read_text().split()]
    # two workers: the first two taken from the queue are the two costliest
    assert sorted(started[:2]) == [7, 9] and sorted(started) == sorted(values)


def _die_on_three(x):
    if x == 3:
        os._exit(7)  # a worker killed mid-task (out of memory, say)
    time.sleep(0.05)
    return x


@needs_two_cpus
def test_a_dead_worker_gives_the_fallback_result_or_raises(tmp_path):
    from concurrent.futures.process import BrokenProcessPool

    out = run_pool(_die_on_three, [1, 2, 3, 4], jobs=2, on_broken=lambda x: ("lost", x))
    assert ("lost", 3) in out and all(o == x or o == ("lost", x) for o, x in zip(out, [1, 2, 3, 4]))
    with pytest.raises(BrokenProcessPool):
        run_pool(_die_on_three, [1, 2, 3, 4], jobs=2)


def _pid(_):
    time.sleep(0.1)  # long enough that both workers take items
    return os.getpid()


@needs_two_cpus
def test_an_open_pool_keeps_its_workers_for_every_round():
    from loopwise.pool import open_pool

    with open_pool(2) as pool:
        first = set(pool.run(_pid, list(range(6))))
        second = set(pool.run(_pid, list(range(6))))
        assert pool.workers == 2
    # the same two workers in both rounds (a pool per round would show four processes)
    assert len(first) == 2 and len(first | second) == 2 and os.getpid() not in first


def test_serial_run_in_this_process_ticks_once_per_item():
    ticks = []
    assert run_pool(str, [1, 2, 3], jobs=1, tick=lambda: ticks.append(1)) == ["1", "2", "3"]
    assert len(ticks) == 3


def test_jobs_are_capped_at_the_cpus_and_the_items():
    cpus = cpu_limit()
    assert cpus == len(os.sched_getaffinity(0))
    assert worker_count(cpus + 50, 1000) == cpus
    assert worker_count(0, 1000) == cpus
    assert worker_count(8, 1) == 1 and worker_count(1, 1000) == 1


@pytest.mark.parametrize("command", ["check", "diff", "report", "sweep"])
def test_help_says_jobs_are_capped(command, capsys):
    from loopwise.cli import main

    with pytest.raises(SystemExit):
        main([command, "--help"])
    assert "capped at the number of CPUs" in " ".join(capsys.readouterr().out.split())


# --- real commands and signals --------------------------------------------------------------

def _cascade(n: int, seed: int) -> str:
    """An invented n-loop cascade (each loop a PI around a first-order lag)."""
    lines = ["# invented test cascade: slow to check on purpose (many breaks)", f"model c{seed}",
             "input r"]
    for k in range(n):
        lines += [f"block C{k} = {k + 2 + seed % 3}*(1 + 1/({0.1 / (k + 1):g}*s))",
                  f"block P{k} = 1/({0.01 * (k + 1):g}*s + 1)"]
    ref = "r"
    for k in range(n):
        lines += [f"e{k} = {ref} - y{k}", f"u{k} = C{k}(e{k})"]
        ref = f"u{k}"
    lines.append(f"y{n - 1} = P{n - 1}(u{n - 1})")
    lines += [f"y{k} = P{k}(y{k + 1})" for k in range(n - 2, -1, -1)]
    lines += [f"break b{k} at y{k}" for k in range(n)]
    return "\n".join(lines) + "\n"


@pytest.fixture
def slow_folder(tmp_path) -> Path:
    folder = tmp_path / "slow"
    folder.mkdir()
    for i in range(40):
        (folder / f"m{i:02d}.loop").write_text(_cascade(12, i))
    return folder


def _children(pid: int) -> set[int]:
    """Live processes whose parent is `pid`."""
    out = set()
    for entry in os.listdir("/proc"):
        if entry.isdigit():
            stat = _stat(int(entry))
            if stat and stat[1] == pid and stat[0] != "Z":
                out.add(int(entry))
    return out


def _stat(pid: int) -> tuple[str, int] | None:
    """(state, parent pid) of a process, None when it is gone."""
    try:
        text = Path(f"/proc/{pid}/stat").read_text()
    except OSError:
        return None
    fields = text[text.rindex(")") + 2:].split()
    return fields[0], int(fields[1])


def _alive(pid: int) -> bool:
    stat = _stat(pid)
    return stat is not None and stat[0] != "Z"


def _start(args: list, cwd: Path) -> subprocess.Popen:
    env = {**os.environ, "CI": "1", "NO_COLOR": "1"}
    env.pop("LOOPWISE_DEBUG", None)
    return subprocess.Popen([sys.executable, "-m", "loopwise", *args], cwd=cwd, env=env,
                            stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True,
                            start_new_session=True)


def _wait_for_workers(proc: subprocess.Popen, count: int, timeout: float = 60.0) -> set[int]:
    deadline = time.monotonic() + timeout
    while time.monotonic() < deadline:
        kids = _children(proc.pid)
        if len(kids) >= count:
            time.sleep(0.3)  # let them take work
            return _children(proc.pid)
        if proc.poll() is not None:
            break
        time.sleep(0.05)
    proc.kill()
    out, err = proc.communicate()
    pytest.fail(f"the workers never appeared (exit {proc.returncode}): {err[-2000:]}")


def _all_gone(pids: set[int], timeout: float = 15.0) -> set[int]:
    deadline = time.monotonic() + timeout
    while time.monotonic() < deadline:
        alive = {p for p in pids if _alive(p)}
        if not alive:
            return set()
        time.sleep(0.05)
    return {p for p in pids if _alive(p)}


def _finish(proc: subprocess.Popen, workers: set[int]) -> tuple[int, str]:
    try:
        _, err = proc.communicate(timeout=60)
    finally:
        for p in workers:  # never leave the test's own strays behind
            if _alive(p):
                os.kill(p, signal.SIGKILL)
        if proc.poll() is None:  # nor a command that hung
            proc.kill()
            proc.communicate()
    return proc.returncode, err


@needs_two_cpus
def test_sigterm_to_check_ends_every_worker_and_exits_143(slow_folder, tmp_path):
    proc = _start(["check", "--jobs", "2", str(slow_folder)], tmp_path)
    workers = _wait_for_workers(proc, 2)
    assert len(workers) == 2
    os.kill(proc.pid, signal.SIGTERM)  # to the command only, as a CI runner or `kill` does
    code, err = _finish(proc, workers)
    assert code == 143, err  # documented: terminated
    assert _all_gone(workers) == set()
    assert "loopwise: terminated" in err and "Traceback" not in err, err


def _ranged_cascade(n: int) -> str:
    """The invented cascade with its first controller's gain uncertain: a box to sweep."""
    return _cascade(n, 0).replace("input r", "param k = 2 in [1.5, 2.5]\ninput r").replace(
        "block C0 = 2*", "block C0 = k*")


@needs_two_cpus
def test_sigterm_to_sweep_ends_every_worker_and_exits_143(tmp_path):
    (tmp_path / "box.loop").write_text(_ranged_cascade(8))
    proc = _start(["sweep", "--jobs", "2", "--samples", "2000", "box.loop", "--format", "json",
                   "--output", "out.json"], tmp_path)
    workers = _wait_for_workers(proc, 2)
    assert len(workers) == 2
    os.kill(proc.pid, signal.SIGTERM)  # to the command only
    code, err = _finish(proc, workers)
    assert code == 143, err
    assert _all_gone(workers) == set()
    assert "loopwise: terminated" in err and "Traceback" not in err, err
    assert list(tmp_path.glob("*out.json*")) == []


@needs_two_cpus
@pytest.mark.parametrize("command", [["check", "--jobs", "2", "slow"],
                                     ["sweep", "--jobs", "2", "--samples", "2000", "box.loop"],
                                     # one model is checked in this process; its 36 figures
                                     # are drawn by the pool
                                     ["report", "--jobs", "2", "--output", "r.html", "slow/m00.loop"]])
def test_ctrl_c_to_the_process_group_ends_workers_without_a_traceback(command, slow_folder,
                                                                      tmp_path):
    (tmp_path / "box.loop").write_text(_ranged_cascade(8))
    proc = _start(command, tmp_path)
    workers = _wait_for_workers(proc, 2)
    for _ in range(3):  # what a terminal does on Ctrl-C (the whole group); users press it again
        os.killpg(proc.pid, signal.SIGINT)
        time.sleep(0.3)
    code, err = _finish(proc, workers)
    assert code == 130, err
    assert _all_gone(workers) == set()
    assert "Traceback" not in err and "Exception ignored" not in err and "KeyboardInterrupt" not in err
    assert err.strip().endswith("loopwise: interrupted"), err
    assert not (tmp_path / "r.html").exists()


@needs_two_cpus
def test_workers_end_when_the_command_is_killed_outright(slow_folder, tmp_path):
    proc = _start(["check", "--jobs", "2", str(slow_folder)], tmp_path)
    workers = _wait_for_workers(proc, 2)
    os.kill(proc.pid, signal.SIGKILL)  # no handler runs: the kernel's parent-death signal must
    code, _ = _finish(proc, workers)
    assert code == -signal.SIGKILL
    assert _all_gone(workers) == set()


@needs_two_cpus
def test_jobs_above_the_cpus_start_no_more_workers_than_cpus(slow_folder, tmp_path):
    proc = _start(["check", "--jobs", str(cpu_limit() + 6), str(slow_folder)], tmp_path)
    workers = _wait_for_workers(proc, min(2, cpu_limit()))
    time.sleep(0.5)
    seen = workers | _children(proc.pid)
    os.kill(proc.pid, signal.SIGTERM)
    code, err = _finish(proc, seen)
    assert len(seen) <= cpu_limit() and code == 143, err


def _wait_for_numpy(proc: subprocess.Popen, timeout: float = 60.0) -> None:
    """Until the command has loaded numpy, i.e. it is inside the check (the command
    line itself never imports it)."""
    deadline = time.monotonic() + timeout
    while time.monotonic() < deadline and proc.poll() is None:
        try:
            if "_multiarray_umath" in Path(f"/proc/{proc.pid}/maps").read_text():
                return
        except OSError:
            pass
        time.sleep(0.05)
    proc.kill()
    pytest.fail("the check never started")


def test_sigterm_to_a_serial_check_is_an_orderly_exit_143(slow_folder, tmp_path):
    proc = _start(["check", str(slow_folder), "--format", "json", "--output", "out.json"],
                  tmp_path)
    _wait_for_numpy(proc)
    os.kill(proc.pid, signal.SIGTERM)
    code, err = _finish(proc, set())
    assert code == 143 and err.strip() == "loopwise: terminated", err
    assert list(tmp_path.glob("*out.json*")) == []


_HALF_SENT = r'''
import os, struct, sys, threading, time
from loopwise import pool as lw_pool

EXECUTOR = None

def half_sent(_):
    # as a worker ended in the middle of sending its result: a message header that
    # promises 1,000 bytes, 10 of them written, then the worker is gone
    fd = EXECUTOR._result_queue._writer.fileno()
    os.write(fd, struct.pack("!i", 1000) + b"x" * 10)
    os._exit(0)

p = lw_pool.Pool(2)
EXECUTOR = p._start()
EXECUTOR.submit(half_sent, 0)
time.sleep(1.0)  # the manager thread is now waiting for the other 990 bytes
done = threading.Event()
threading.Thread(target=lambda: (lw_pool._stop(EXECUTOR), done.set()), daemon=True).start()
print("stopped" if done.wait(20) else "hung", flush=True)
os._exit(0)
'''


def test_stopping_a_pool_whose_worker_died_while_sending_its_result_does_not_hang(tmp_path):
    """A worker ended halfway through sending a result left the pool's manager thread
    reading from a pipe whose other write end the command itself holds: Ctrl-C then
    hung the command for good (seen under load in the signal tests above). Simulated
    here exactly: a worker writes half a message and exits."""
    script = tmp_path / "half_sent.py"
    script.write_text(_HALF_SENT)
    out = subprocess.run([sys.executable, str(script)], capture_output=True, text=True, timeout=60)
    assert out.stdout.strip() == "stopped", out.stdout + out.stderr
    assert "Traceback" not in out.stderr, out.stderr
