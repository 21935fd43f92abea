"""Speed of `loopwise sweep` against separate `check` calls, measured in the same run.

The servo demo model (models/servo_axis.loop, three ranged params: kt, J, Td) is swept
with N space-filling samples (default 1,000; corners, local search and boundaries come
on top). The same model is then checked at N of the sweep's space-filling points in
two ways, one after another, and both ratios are printed:

1. in-process `loopwise.check_text` calls (the primary comparison of docs/sweep.md:
   the work of a check without the start of a Python process);
2. separate `loopwise check MODEL --set kt=... --set J=... --set Td=...` command runs,
   each a new process (what an engineer scripting N checks would run; start-up and
   import included).

The aim in the sweep issue is 20x and under 10 s on 2 cores. The sweep analyses its
plants in batches with the batched engine (`sweep/evaluate.py` over
`analysis.check_many(short=True)`): the margins' extension of each plant stops at its
settling frequency where that settles every value (docs/method.md), so a plant costs
about half of what a check call costs (figures in docs/sweep.md, "Speed").

    python bench/sweep.py [--samples N] [--jobs J] [--checks M] [--commands K]

`--checks M` times only M of the N in-process calls and `--commands K` only K of the N
command runs (default 20), each scaled to N (the calls are independent and alike; the
default checks all N in process).
"""
from __future__ import annotations

import argparse
import os
import resource
import subprocess
import sys
import time
from pathlib import Path

import loopwise

from loopwise import check_text
from loopwise.pool import cpu_limit, worker_count
from loopwise.settings import Settings
from loopwise.sweep import SweepOptions, sweep_paths
from loopwise.sweep.design import space_filling, to_values

ROOT = Path(__file__).resolve().parents[1]

MODEL = ROOT / "models" / "servo_axis.loop"


def _cpu() -> float:
    own = resource.getrusage(resource.RUSAGE_SELF)
    kids = resource.getrusage(resource.RUSAGE_CHILDREN)
    return own.ru_utime + own.ru_stime + kids.ru_utime + kids.ru_stime


def timed(fn):
    wall, cpu = time.perf_counter(), _cpu()
    out = fn()
    return out, time.perf_counter() - wall, _cpu() - cpu


def main() -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--samples", type=int, default=1000)
    ap.add_argument("--jobs", type=int, default=0, help="sweep processes (0: one per CPU)")
    ap.add_argument("--checks", type=int, default=None, help="time this many of the N in-process check calls")
    ap.add_argument("--commands", type=int, default=20, help="time this many of the N `loopwise check` runs")
    ap.add_argument("--seed", type=int, default=0)
    args = ap.parse_args()
    n = args.samples
    jobs = worker_count(args.jobs, n)  # what the sweep's pool will use (capped at the CPUs)

    run, sweep_wall, sweep_cpu = timed(lambda: sweep_paths([MODEL], options=SweepOptions(n, args.seed), jobs=jobs))
    (model,) = run.models
    plants, c = model.samples, model.counts
    names = [p.name for p in model.params]
    print(f"model {MODEL.relative_to(ROOT)}: params {', '.join(names)}; {cpu_limit()} CPU(s)")
    print(f"sweep --samples {n} --jobs {jobs}: {plants} plants ({c.corners} corners, {c.space_filling} "
          f"space-filling, {c.local_search} local search, {c.boundary} boundary)")
    print(f"  wall {sweep_wall:8.2f} s   cpu {sweep_cpu:8.2f} s   {1e3 * sweep_wall / plants:7.1f} ms wall per plant",
          flush=True)
    points = to_values(space_filling(n, len(names), args.seed), [p.lo for p in model.params],
                       [p.hi for p in model.params])
    text = MODEL.read_text()
    m = min(args.checks or n, n)

    def checks():
        for row in points[:m]:
            check_text(text, str(MODEL), settings=Settings(overrides=tuple(zip(names, map(float, row)))))

    _, check_wall, check_cpu = timed(checks)
    check_wall, check_cpu = check_wall * n / m, check_cpu * n / m
    scaled = f" ({m} timed, scaled to {n})" if m < n else ""
    print(f"{n} separate check_text calls in this process{scaled}:")
    print(f"  wall {check_wall:8.2f} s   cpu {check_cpu:8.2f} s   {1e3 * check_wall / n:7.1f} ms wall per call")
    print(f"ratio in-process checks / sweep, wall: {check_wall / sweep_wall:5.2f}x   "
          f"(per plant: {(check_wall / n) / (sweep_wall / plants):5.2f}x; aim: 20x and under 10 s)")
    print(f"ratio in-process checks / sweep, cpu:  {check_cpu / sweep_cpu:5.2f}x   "
          f"(per plant: {(check_cpu / n) / (sweep_cpu / plants):5.2f}x)", flush=True)

    k = min(args.commands, n)
    if k <= 0:
        return 0
    # the command as an engineer would run it, on the loopwise this script imports
    env = {**os.environ, "PYTHONPATH": os.pathsep.join(
        [str(Path(loopwise.__file__).resolve().parents[1])] + [p for p in [os.environ.get("PYTHONPATH")] if p])}

    def commands():
        for row in points[:k]:
            sets = [a for name, v in zip(names, row) for a in ("--set", f"{name}={float(v)!r}")]
            done = subprocess.run([sys.executable, "-m", "loopwise", "check", str(MODEL), *sets, "--no-progress"],
                                  env=env, stdout=subprocess.DEVNULL, stderr=subprocess.PIPE, text=True)
            if done.returncode not in (0, 1):  # 1: a requirement not met, still a check
                raise SystemExit(f"loopwise check exited {done.returncode}: {done.stderr.strip()}")

    _, cmd_wall, cmd_cpu = timed(commands)
    cmd_wall, cmd_cpu = cmd_wall * n / k, cmd_cpu * n / k
    print(f"{n} separate `loopwise check --set ...` command runs ({k} timed, scaled to {n}):")
    print(f"  wall {cmd_wall:8.2f} s   cpu {cmd_cpu:8.2f} s   {1e3 * cmd_wall / n:7.1f} ms wall per run")
    print(f"ratio commands / sweep, wall: {cmd_wall / sweep_wall:5.2f}x   "
          f"(per plant: {(cmd_wall / n) / (sweep_wall / plants):5.2f}x)")
    print(f"ratio commands / sweep, cpu:  {cmd_cpu / sweep_cpu:5.2f}x   "
          f"(per plant: {(cmd_cpu / n) / (sweep_cpu / plants):5.2f}x)")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
