"""How long `loopwise report` takes and how big the page is, against a reference
revision measured in the same run.

Run: python bench/report.py [--reference REV] [--repeat N] [PATH...]   (default: models/)

The reference (default: e080c4c, the last commit before the pictures were thinned
by deviation and laid out without a layout pass) is exported with `git archive`
into a temporary folder and run from there; this tree runs from src/. Each
measurement runs in a fresh interpreter, reference and this tree taking turns,
and the median of `--repeat` runs is printed, so both sides see the same load:

- the whole command, `python -m loopwise report PATH --jobs 1` and `--jobs 2`
  (wall time: start-up, check, drawing, writing);
- the drawing alone: `render_html` on the checked models in one process, after a
  warm-up (the check itself is the engine's business, see bench/check.py);
- the page size and the largest inline figure.

Ratios are this tree / reference (below 1: faster or smaller). Wall times
depend on the machine and its load; the CPU seconds beside them (the command
with its worker processes, or the drawing process) are steadier on a shared
machine. Absolute figures are printed only for context.
"""
from __future__ import annotations

import argparse
import json
import os
import resource
import statistics
import subprocess
import sys
import tarfile
import tempfile
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent
REFERENCE = "e080c4c"

#: runs inside the interpreter under test; prints one JSON line
DRAW = r"""
import json, re, sys, time
from loopwise.run import check_paths
from loopwise.report.html import figure_count, render_html
run = check_paths(sys.argv[1:])
render_html(run)  # warm-up: imports, font cache
t, c = time.perf_counter(), time.process_time()
page = render_html(run)
draw, cpu = time.perf_counter() - t, time.process_time() - c
figures = re.findall(r"<svg.*?</svg>", page, flags=re.S)
print(json.dumps({"draw": draw, "cpu": cpu, "bytes": len(page.encode()), "figures": figure_count(run),
                  "largest": max((len(f.encode()) for f in figures), default=0),
                  "models": len(run.models), "breaks": sum(len(m.breaks) for m in run.models)}))
"""


def _export(rev: str, into: Path) -> Path:
    """The reference's src/ and grammar/ in `into` (git archive: no worktree, no checkout)."""
    archive = into / "ref.tar"
    with archive.open("wb") as out:
        subprocess.run(["git", "-C", str(ROOT), "archive", "--format=tar", rev, "src", "grammar"],
                       stdout=out, check=True)
    with tarfile.open(archive) as tar:
        tar.extractall(into, filter="data")
    return into / "src"


def _env(src: Path) -> dict:
    env = dict(os.environ, PYTHONPATH=str(src), PYTHONDONTWRITEBYTECODE="1")
    env.pop("CI", None)
    return env


def _cpu() -> float:
    r = resource.getrusage(resource.RUSAGE_CHILDREN)
    return r.ru_utime + r.ru_stime


def _command(src: Path, paths: list[str], jobs: int, out: Path) -> tuple[float, float]:
    """(wall seconds, CPU seconds of the command and its worker processes)."""
    t, c = time.perf_counter(), _cpu()
    subprocess.run([sys.executable, "-m", "loopwise", "report", *paths, "--output", str(out),
                    "--no-progress", "--jobs", str(jobs)], env=_env(src), check=False,
                   stdout=subprocess.DEVNULL)
    return time.perf_counter() - t, _cpu() - c


def _draw(src: Path, paths: list[str]) -> dict:
    done = subprocess.run([sys.executable, "-c", DRAW, *paths], env=_env(src), check=True,
                          capture_output=True, text=True)
    return json.loads(done.stdout.strip().splitlines()[-1])


def main(argv: list[str]) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--reference", default=REFERENCE, help="the revision to compare with")
    ap.add_argument("--repeat", type=int, default=3, help="runs per measurement (median)")
    ap.add_argument("paths", nargs="*", default=[str(ROOT / "models")])
    args = ap.parse_args(argv)
    sides = {"reference": None, "this tree": ROOT / "src"}
    results: dict[str, dict[str, list]] = {name: {} for name in sides}
    with tempfile.TemporaryDirectory() as tmp:
        tmp = Path(tmp)
        sides["reference"] = _export(args.reference, tmp)
        for _ in range(args.repeat):
            for name, src in sides.items():  # the two sides take turns under the same load
                r = results[name]
                for jobs in (1, 2):
                    wall, cpu = _command(src, args.paths, jobs, tmp / f"{jobs}.html")
                    r.setdefault(f"loopwise report --jobs {jobs}", []).append(wall)
                    r.setdefault(f"  CPU time, --jobs {jobs}", []).append(cpu)
                d = _draw(src, args.paths)
                r.setdefault("drawing alone (1 process)", []).append(d["draw"])
                r.setdefault("  CPU time, drawing alone", []).append(d["cpu"])
                r["size"] = d
    ref, new = results["reference"]["size"], results["this tree"]["size"]
    print(f"{', '.join(args.paths)}: {new['models']} models, {new['breaks']} breaks, "
          f"{new['figures']} figures; reference {args.reference} in a temporary folder; "
          f"median of {args.repeat}; load average {os.getloadavg()[0]:.1f} on {os.cpu_count()} CPUs")
    print(f"{'':32}{'reference':>12}{'this tree':>12}{'ratio':>8}")
    for key in [k for k in results["this tree"] if k != "size"]:
        a = statistics.median(results["reference"][key])
        b = statistics.median(results["this tree"][key])
        print(f"{key:32}{a:10.2f} s{b:10.2f} s{b / a:8.2f}")
    print(f"{'page size':32}{ref['bytes'] / 1e6:9.2f} MB{new['bytes'] / 1e6:9.2f} MB"
          f"{new['bytes'] / ref['bytes']:8.2f}")
    print(f"{'largest figure':32}{ref['largest'] / 1e3:9.1f} kB{new['largest'] / 1e3:9.1f} kB"
          f"{new['largest'] / ref['largest']:8.2f}")
    return 0


if __name__ == "__main__":
    raise SystemExit(main(sys.argv[1:]))
