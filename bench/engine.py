"""Benchmark of the engine: against python-control and against the previous engine, same run.

    python bench/engine.py                      # everything (a few minutes)
    python bench/engine.py --skip-previous      # without the previous engine
    python bench/engine.py --sizes 5 10 20 30 40 47 50 60 --close-sizes 30 60

CPU time (time.process_time: the machine may be shared), BLAS single-threaded for
every side. Three parts, each printing ratios against references timed here:

1. verdict + all margins of 200 delay-free loops of order 1 to 8
   (tests/reference/loopsets.py): `analyse_loops` (all at once, engine/batch.py) and
   `analyse_loop` (one by one) vs python-control 0.10.2's `nyquist_response` +
   `stability_margins(returnall=True)` + `disk_margins` (a 1000-point log grid over the
   loop's roots +- 3 decades) on the same loops, and vs the previous engine's
   `analyse_loop`. Verdicts are scored against the closed-loop poles of `feedback(L, 1)`
   (cases within 1e-9 of the axis left out).
2. one whole-model check of the servo demo (a three-break drive cascade with a 150 us
   converter delay), warm: `check_file`, and the previous engine's.
3. nested cascades of n loops and a model of 100 independent loops: one check each, and
   how the time grows with n (d log t / d log n).
"""
from __future__ import annotations

import argparse
import math
import os
import sys
import time
import warnings
from pathlib import Path

for _var in ("OPENBLAS_NUM_THREADS", "OMP_NUM_THREADS", "MKL_NUM_THREADS"):
    os.environ.setdefault(_var, "1")

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT / "tests"))
sys.path.insert(0, str(ROOT / "bench"))

import control  # noqa: E402  (test-time reference only; never imported by src/loopwise)
import numpy as np  # noqa: E402

from loopwise.analysis import check_file, check_prepared  # noqa: E402
from loopwise.testing import analyse_loop, analyse_loops, prepare_text  # noqa: E402
from loopwise.transfer import Transfer  # noqa: E402
from previous import DEFAULT_REVISION, previous_tree, run_in  # noqa: E402
from reference.loopsets import closed_loop_rhp, delay_free_loops, near_axis, nested_cascade  # noqa: E402


def cpu(fn, repeat: int = 1) -> float:
    """Best CPU time of `repeat` runs (after one warm-up run)."""
    fn()
    best = math.inf
    for _ in range(repeat):
        t0 = time.process_time()
        fn()
        best = min(best, time.process_time() - t0)
    return best


def loops() -> list:
    return [c for c in delay_free_loops() if len(c.poles) <= 8][:200]


def _grid(case) -> np.ndarray:
    mags = np.abs(np.concatenate([np.asarray(case.poles, complex), np.asarray(case.zeros, complex)]))
    mags = mags[mags > 0]
    lo, hi = (mags.min(), mags.max()) if mags.size else (1.0, 1.0)
    return np.logspace(np.log10(lo) - 3, np.log10(hi) + 3, 1000)


#: run in the previous revision's tree, whose analyse_loop was still in loopwise.analysis
PREVIOUS_LOOPS = """
import json, time, warnings, sys
warnings.simplefilter("ignore")
from loopwise.analysis import analyse_loop
from loopwise.transfer import Transfer
from reference.loopsets import delay_free_loops
cases = [c for c in delay_free_loops() if len(c.poles) <= 8][:200]
Ls = [Transfer.from_zpk(list(c.zeros), list(c.poles), c.gain) for c in cases]
def run():
    for L in Ls:
        try:
            analyse_loop(L)
        except Exception:
            pass
run()
t0 = time.process_time(); run(); print(json.dumps({"cpu": time.process_time() - t0}))
"""


def bench_loops(previous) -> None:
    cases = loops()
    Ls = [Transfer.from_zpk(list(c.zeros), list(c.poles), c.gain) for c in cases]
    systems = [c.to_control() for c in cases]
    grids = [_grid(c) for c in cases]
    warnings.simplefilter("ignore")
    t_many = cpu(lambda: analyse_loops(Ls), 3)
    t_one = cpu(lambda: [analyse_loop(L) for L in Ls], 1)

    def reference():
        for sys_, w in zip(systems, grids):
            control.nyquist_response(sys_)
            control.stability_margins(sys_, returnall=True)
            control.disk_margins(sys_, w, skew=0.0)

    t_ref = cpu(reference, 1)
    results = analyse_loops(Ls)
    wrong, skipped, ref_wrong = [], 0, 0
    for case, res, sys_ in zip(cases, results, systems):
        z_ref, poles = closed_loop_rhp(case)
        if near_axis(poles):
            skipped += 1
            continue
        if res.closed_loop_rhp_poles != z_ref or res.marginal:
            wrong.append(f"{case.name}: Z {res.closed_loop_rhp_poles}, poles say {z_ref}")
        if control.nyquist_response(sys_).count + case.rhp_poles != z_ref:
            ref_wrong += 1
    n = len(cases)
    print(f"\n== verdict + all margins, {n} delay-free loops of order 1-8 ({skipped} too close to the axis to score)")
    print(f"  loopwise analyse_loops (all at once)  {1e3 * t_many / n:7.3f} ms/loop")
    print(f"  loopwise analyse_loop (one by one)    {1e3 * t_one / n:7.3f} ms/loop")
    print(f"  python-control nyquist_response + stability_margins + disk_margins(1000 points)"
          f"  {1e3 * t_ref / n:7.3f} ms/loop")
    print(f"  ratio python-control / loopwise: {t_ref / t_many:.1f}x (all at once), "
          f"{t_ref / t_one:.1f}x (one by one)")
    if previous is not None:
        t_prev = run_in(previous, PREVIOUS_LOOPS)["cpu"]
        print(f"  previous engine analyse_loop          {1e3 * t_prev / n:7.3f} ms/loop"
              f"  (ratio previous / now: {t_prev / t_many:.1f}x all at once, {t_prev / t_one:.1f}x one by one)")
    print(f"  wrong verdicts against closed-loop poles: loopwise {len(wrong)}, "
          f"python-control's nyquist_response count {ref_wrong}")
    for line in wrong:
        print("    loopwise:", line)


PREVIOUS_SERVO = """
import json, time
from loopwise.analysis import check_file
path = "models/servo_axis.loop"
check_file(path)
best = 1e9
for _ in range(5):
    t0 = time.process_time()
    check_file(path)
    best = min(best, time.process_time() - t0)
print(json.dumps({"cpu": best}))
"""


def bench_servo(previous) -> None:
    path = ROOT / "models" / "servo_axis.loop"
    t = cpu(lambda: check_file(path), 10)
    res = check_file(path)
    print(f"\n== one whole-model check of {path.name} (3 breaks, 150 us delay), warm, best of 10")
    print(f"  loopwise check_file  {1e3 * t:7.2f} ms CPU; breaks: "
          + ", ".join(f"{b.name} Z={b.closed_loop_rhp_poles}" for b in res.breaks))
    if previous is not None:
        t_prev = run_in(previous, PREVIOUS_SERVO)["cpu"]
        print(f"  previous engine      {1e3 * t_prev:7.2f} ms CPU  (ratio previous / now: {t_prev / t:.1f}x)")


def independent(n: int) -> str:
    lines = ["model independent", "input r"]
    for i in range(n):
        lines += [f"e{i} = r - y{i}", f"y{i} = [{1 + i % 5}/((s + 1)*(0.{1 + i % 9}*s + 1))](e{i})",
                  f"break b{i} at y{i}"]
    return "\n".join(lines) + "\n"


PREVIOUS_TEXT = """
import json, time
from loopwise.analysis import check_text
text = TEXT
t0 = time.process_time()
check_text(text)
print(json.dumps({"cpu": time.process_time() - t0}))
"""


def bench_scale(sizes, previous, previous_max: int, close: list[int] = ()) -> None:
    print("\n== growth with the number of breaks (one check each, CPU s)")
    print(f"  {'model':>28} {'breaks':>6} {'loopwise s':>11} {'growth':>7} {'previous s':>11}")
    # loops 3 times apart (23 decades at 47 loops; of 48 to 53 loops only 50 is counted,
    # the others are refused, LW406, and the time is that of the refusal; from 54 on the
    # span alone refuses them), then loops 2 times apart (fewer decades for as many breaks)
    rows = [(f"nested cascade {n}", "sep3", n, nested_cascade(n).text()) for n in sizes]
    rows += [(f"nested cascade {n}, 2x apart", "sep2", n, nested_cascade(n, separation=2.0).text()) for n in close]
    rows.append(("100 independent loops", None, 100, independent(100)))
    last: dict = {}
    for label, group, n, text in rows:
        prep = prepare_text(text)
        t0 = time.process_time()
        try:
            t = cpu(lambda: check_prepared(prep), 1) + 0.0
            ok = True
        except Exception as exc:  # a refusal is reported, not hidden
            t, ok = time.process_time() - t0, False  # the warm-up run refused: the one run
            label += f" ({type(exc).__name__}: {str(exc)[:60]}...)"
        growth = ""
        if ok and group in last:
            growth = f"{math.log(t / last[group][1]) / math.log(n / last[group][0]):.2f}"
        if ok and group is not None:
            last[group] = (n, t)
        t_prev = ""
        if previous is not None and n <= previous_max:
            snippet = PREVIOUS_TEXT.replace("TEXT", repr(text))
            t_prev = f"{run_in(previous, snippet)['cpu']:.2f}"
        print(f"  {label:>28} {n:6d} {t:11.3f} {growth:>7} {t_prev:>11}")
    print("  growth: d log(time) / d log(breaks) from the previous cascade of the same spacing")


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--sizes", type=int, nargs="*", default=[5, 10, 20, 30, 40, 47, 50, 60])
    ap.add_argument("--close-sizes", type=int, nargs="*", default=[30, 60],
                    help="nested cascades with loops 2 times apart")
    ap.add_argument("--skip-previous", action="store_true")
    ap.add_argument("--previous", default=DEFAULT_REVISION, help="git revision of the previous engine")
    ap.add_argument("--previous-max", type=int, default=20, help="largest model the previous engine is timed on")
    ap.add_argument("--skip-loops", action="store_true")
    args = ap.parse_args(argv)
    print(f"python-control {control.__version__}, numpy {np.__version__}, CPU time, BLAS single-threaded")

    def body(previous):
        if not args.skip_loops:
            bench_loops(previous)
        bench_servo(previous)
        if args.sizes:
            bench_scale(args.sizes, previous, args.previous_max, args.close_sizes)

    if args.skip_previous:
        body(None)
    else:
        with previous_tree(args.previous) as root:
            print(f"previous engine: revision {args.previous}")
            body(root)
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
