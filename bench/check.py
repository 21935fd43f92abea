"""Wall time of `loopwise check`: the demo models and 200 generated ones, with
--jobs 1 and --jobs 2.

Every figure is measured in this run, and each is also printed as a ratio
against a reference measured the same way in the same run (the command's own
start-up, and the --jobs 1 time), so the numbers compare across machines.

    python bench/check.py [--models N] [--repeat R]
"""
from __future__ import annotations

import argparse
import resource
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]

# invented speed loops: a PI around a first-order lag with an integrator and a
# measurement delay; gains and time constants vary from model to model
TEMPLATE = """\
model gen{i}
input r
block C = {kp}*(1 + 1/({ti}*s))
block P = 1/(s*({tau}*s + 1))
block H = exp(-{delay}*s)
e = r - m
u = C(e)
y = P(u)
m = H(y)
break loop at m
require loop phase_margin >= 20deg
"""


def generate(folder: Path, n: int) -> None:
    for i in range(n):
        kp = 0.5 + 1.5 * (i % 7) / 6           # 0.5 .. 2.0
        ti = 2.0 + (i % 5)                      # 2 .. 6 s
        tau = 0.1 + 0.05 * (i % 4)              # 0.10 .. 0.25 s
        delay = 0.01 * (1 + i % 3)              # 10 .. 30 ms
        text = TEMPLATE.format(i=i, kp=f"{kp:.4g}", ti=f"{ti:.4g}", tau=f"{tau:.4g}",
                               delay=f"{delay:.4g}")
        (folder / f"gen{i:03d}.loop").write_text(text)


def _child_cpu() -> float:
    use = resource.getrusage(resource.RUSAGE_CHILDREN)
    return use.ru_utime + use.ru_stime


def wall(args: list[str], repeat: int) -> tuple[float, float, int]:
    """Best-of-`repeat` wall time of one command (the minimum is the least noisy),
    and the CPU time of that command and its worker processes (robust to a busy
    machine, which stretches wall time but not CPU time)."""
    best, code = (float("inf"), 0.0), 0
    for _ in range(repeat):
        c0, t0 = _child_cpu(), time.perf_counter()
        proc = subprocess.run([sys.executable, "-m", "loopwise", *args], cwd=ROOT,
                              capture_output=True, text=True)
        run = (time.perf_counter() - t0, _child_cpu() - c0)
        best = min(best, run)
        code = proc.returncode
        if "Traceback" in proc.stderr:
            sys.exit(f"loopwise {' '.join(args)} failed:\n{proc.stderr}")
    return best[0], best[1], code


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--models", type=int, default=200)
    ap.add_argument("--repeat", type=int, default=3)
    opts = ap.parse_args()

    startup, startup_cpu, _ = wall(["--version"], opts.repeat)
    demo = sorted((ROOT / "models").rglob("*.loop"))
    print(f"start-up (loopwise --version): {startup * 1e3:.0f} ms wall, "
          f"{startup_cpu * 1e3:.0f} ms CPU  [reference]")
    rows = []
    with tempfile.TemporaryDirectory() as tmp:
        gen = Path(tmp)
        generate(gen, opts.models)
        for label, target, n in [("models/", "models", len(demo)),
                                 (f"{opts.models} generated", str(gen), opts.models)]:
            for jobs in (1, 2):
                t, cpu, code = wall(["check", target, "--format", "json", "--jobs", str(jobs)],
                                    opts.repeat)
                rows.append((label, jobs, n, t, cpu, code))
    print(f"{'models':>16} {'jobs':>4} {'n':>4} {'wall s':>8} {'CPU s':>7} {'exit':>4} "
          f"{'wall/model ms':>13} {'CPU/model ms':>12} {'x start-up':>10} {'jobs1/jobsN':>11}")
    serial = {}
    for label, jobs, n, t, cpu, code in rows:
        serial.setdefault(label, t)
        per_wall = max(t - startup, 0.0) / n * 1e3
        per_cpu = max(cpu - startup_cpu, 0.0) / n * 1e3
        print(f"{label:>16} {jobs:>4} {n:>4} {t:8.2f} {cpu:7.2f} {code:>4} {per_wall:13.1f} "
              f"{per_cpu:12.1f} {t / startup:10.1f} {serial[label] / t:11.2f}")
    print(f"(best of {opts.repeat}; per model = (run - start-up) / n; jobs1/jobsN is the "
          f"wall-time speed-up; median start-up ratio "
          f"{statistics.median(r[3] / startup for r in rows):.1f})")


if __name__ == "__main__":
    main()
