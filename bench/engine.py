"""Benchmark of the Nyquist engine against python-control, measured in the same run.

    python bench/engine.py                      # everything (a few minutes with 30 loops)
    python bench/engine.py --sizes 5 10 20      # cascade sizes to time
    python bench/engine.py --skip-set           # only the models

Three parts, each printing a ratio against a reference timed here (never a
stored number):
1. the generated delay-free set (tests/reference/loopsets.py): our verdict
   (`nyquist_verdict`: P, N, Z; `analyse_loop` with margins timed beside it) vs python-control 0.10.2
   `nyquist_response(L).count`; both verdicts scored against the closed-loop
   poles of `feedback(L, 1)` (cases closer than 1e-9 to the axis left out).
2. the servo demo model (all breaks, exact delays) vs python-control on its
   delay-free wiring (`interconnect`, `nyquist_response`, `stability_margins`).
3. generated nested cascades of n loops: all breaks, and how time grows with n.
"""
from __future__ import annotations

import argparse
import math
import sys
import time
import warnings
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT / "tests"))

import control  # noqa: E402  (test-time reference only; never imported by src/loopwise)
import numpy as np  # noqa: E402

from loopwise.analysis import analyse_loop, check_file, check_text, nyquist_verdict  # noqa: E402
from loopwise.transfer import Transfer  # noqa: E402
from reference.loopsets import closed_loop_rhp, delay_free_loops, near_axis, nested_cascade  # noqa: E402


def _timed(fn, *args, **kwargs):
    t0 = time.perf_counter()
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        try:
            out = fn(*args, **kwargs)
        except Exception as exc:  # a failure is counted, never hidden
            out = exc
    return out, time.perf_counter() - t0


def bench_set() -> None:
    cases = delay_free_loops()
    t_ours = t_ref = t_full = 0.0
    ours_wrong, ref_wrong, errors, skipped = [], [], [], 0
    for case in cases:
        z_ref, poles = closed_loop_rhp(case)
        L = Transfer.from_zpk(list(case.zeros), list(case.poles), case.gain)
        # the like-for-like comparison: the verdict alone (P, N, Z), as nyquist_response gives
        res, dt = _timed(nyquist_verdict, L)
        t_ours += dt
        _, dt = _timed(analyse_loop, L, name=case.name)  # and the whole job, margins included
        t_full += dt
        nyq, dt = _timed(control.nyquist_response, case.to_control())
        t_ref += dt
        if near_axis(poles):
            skipped += 1
            continue
        if isinstance(res, Exception):
            errors.append(f"{case.name}: {type(res).__name__}")
        elif res.Z != z_ref:
            ours_wrong.append(f"{case.name}: Z {res.Z}, poles say {z_ref}")
        if isinstance(nyq, Exception) or nyq.count + case.rhp_poles != z_ref:
            ref_wrong.append(case.name)
    n = len(cases)
    print(f"\n== generated delay-free set: {n} loops ({skipped} too close to the axis to score)")
    print(f"  loopwise nyquist_verdict   {t_ours:8.2f} s  ({1e3 * t_ours / n:6.1f} ms/loop)")
    print(f"  loopwise analyse_loop      {t_full:8.2f} s  ({1e3 * t_full / n:6.1f} ms/loop, margins too)")
    print(f"  python-control nyquist     {t_ref:8.2f} s  ({1e3 * t_ref / n:6.1f} ms/loop)")
    print(f"  ratio loopwise / python-control: {t_ours / t_ref:.2f}")
    print(f"  disagreements with closed-loop poles: loopwise {len(ours_wrong)} "
          f"(+{len(errors)} errors), python-control {len(ref_wrong)}")
    for line in ours_wrong + errors:
        print("    loopwise:", line)


def _servo_reference() -> float:
    """python-control on the delay-free servo wiring: every break's L, count and margins."""
    from reference.test_cascades_vs_python_control import servo_axis
    wiring = servo_axis()
    t0 = time.perf_counter()
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        for name in wiring.cuts:
            L = -wiring.loop(name)
            control.nyquist_response(L)
            control.stability_margins(L)
    return time.perf_counter() - t0


def bench_servo(repeat: int = 3) -> None:
    path = ROOT / "models" / "servo_axis.loop"
    ours = []
    for _ in range(repeat):
        res, dt = _timed(check_file, path)
        ours.append(dt)
    ref = min(_servo_reference() for _ in range(repeat))
    print(f"\n== servo demo model ({path.name}): all breaks, exact delay, margins")
    if isinstance(res, Exception):
        print(f"  loopwise failed: {type(res).__name__}: {res}")
        return
    print(f"  loopwise check_file        {min(ours):8.3f} s  (best of {repeat}); breaks: "
          + ", ".join(f"{b.name} Z={b.closed_loop_rhp_poles}" for b in res.breaks))
    print(f"  python-control, delay-free {ref:8.3f} s  (interconnect + nyquist + margins per break)")
    print(f"  ratio loopwise / python-control: {min(ours) / ref:.2f}")


def _cascade_reference(cascade) -> tuple[float, int]:
    wiring = cascade.wiring()
    t0 = time.perf_counter()
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        z = int(np.sum(wiring.closed_loop().poles().real > 0))
        for k in range(1, cascade.n + 1):
            control.nyquist_response(-wiring.loop(cascade.brk(k)))
    return time.perf_counter() - t0, z


def bench_cascades(sizes, separation: float) -> None:
    print(f"\n== nested cascades (loop k+1's crossover ~1/{separation:g} of loop k's), all breaks")
    print(f"  {'loops':>5} {'loopwise s':>11} {'python-control s':>17} {'ratio':>6} "
          f"{'Z ours/ref':>10} {'growth exponent':>16}")
    prev = None
    for n in sizes:
        cascade = nested_cascade(n, seed=5, separation=separation)
        res, dt = _timed(check_text, cascade.text(), file=f"<cascade {n}>")
        ref_dt, z_ref = _cascade_reference(cascade)
        z = "error" if isinstance(res, Exception) else res.closed_loop_rhp_poles
        failed = isinstance(res, Exception)
        growth = ("" if prev is None or failed
                  else f"{math.log(dt / prev[1]) / math.log(n / prev[0]):.2f}")
        print(f"  {n:5d} {dt:11.2f} {ref_dt:17.2f} {dt / ref_dt:6.2f} {f'{z}/{z_ref}':>10} {growth:>16}")
        if failed:
            print(f"        loopwise failed after {dt:.1f} s: {type(res).__name__}: {res}")
        else:
            prev = (n, dt)
    print("  growth exponent: d log(time) / d log(loops) from the previous size that succeeded")


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--sizes", type=int, nargs="*", default=[5, 10, 20, 30])
    ap.add_argument("--separation", type=float, default=3.0)
    ap.add_argument("--skip-set", action="store_true")
    ap.add_argument("--repeat", type=int, default=3)
    args = ap.parse_args(argv)
    print(f"python-control {control.__version__}, numpy {np.__version__}")
    if not args.skip_set:
        bench_set()
    bench_servo(args.repeat)
    if args.sizes:
        bench_cascades(args.sizes, args.separation)
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
