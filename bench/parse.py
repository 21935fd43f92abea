"""Parse time of the largest demo model and of a generated 1,000-line model.

Every figure is measured in this run and also printed as a ratio against
references measured the same way in the same run, so the numbers compare
across machines:

- `lark only`: the bare LALR parse of the same text with the project's grammar
  (no syntax tree, no checks): what `parse_text` adds on top of lark.
- `lex only`: one pass of a regular expression over the same text that splits
  it into tokens: a floor that no parser can beat.
- `read`: parse + names, includes, transfers and the diagram
  (`loopwise.testing.prepare_text`), for the demo model, to put parsing in
  proportion to the rest of reading a model.

Start-up (fresh interpreters, median of `--starts`): from importing the parser
module to the first parsed line, with the LALR tables that ship in the package
(`shipped`), against two references measured the same way: the tables built
from the grammar at every start (`built`), and lark's own pickle cache, warm,
in a private temporary folder (`lark cache`: what loopwise did before it
shipped the tables, minus the shared-folder risk).

    python bench/parse.py [--repeat R] [--lines N] [--starts K]
"""
from __future__ import annotations

import argparse
import re
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

from loopwise.language.parse import _parser, parse_text

ROOT = Path(__file__).resolve().parents[1]
TOKEN = re.compile(r"[A-Za-z_]\w*|\d+(\.\d*)?([eE][+-]?\d+)?\w*%?|->|>=|<=|#[^\n]*|\S")


def generated_model(lines: int) -> str:
    """An invented chain of first-order stages with PI controllers: `lines` lines."""
    out = ["# generated for bench/parse.py: an invented chain of PI-controlled stages",
           "model generated", "input r0"]
    i = 0
    while len(out) + 9 <= lines:
        out += [
            f"param k{i} = {0.5 + (i % 7) * 0.25:g}          # stage gain",
            f"param T{i} = {10 + i % 13}ms in [{5 + i % 13}ms, {20 + i % 13}ms]",
            f"block C{i} = k{i}*(1 + 1/(4*T{i}*s))",
            f"block P{i} = exp(-{50 + i % 5}us*s) / (T{i}*s + 1)",
            f"e{i} = r{i} - y{i}",
            f"y{i} = P{i}(C{i}(e{i}))",
            f"r{i + 1} = [1/(0.1*s + 1)](y{i}) + 0.5*r{i} \\",
            f"        - 0.01*e{i}",
            f"break b{i} at y{i} -> e{i}",
        ]
        i += 1
    out += ["require * phase_margin >= 30deg"] * (lines - len(out))
    return "\n".join(out) + "\n"


def tokens(text: str) -> int:
    """Tokens the parser sees (comments left out)."""
    return sum(1 for m in TOKEN.finditer(text) if not m.group(0).startswith("#"))


def best(fn, repeat: int) -> float:
    """Median of `repeat` timings of fn() (seconds)."""
    times = []
    for _ in range(repeat):
        t0 = time.perf_counter()
        fn()
        times.append(time.perf_counter() - t0)
    return statistics.median(times)


def measure(name: str, text: str, file: str, repeat: int, with_read: bool) -> None:
    parse_text(text, file)  # build the parser once (cached), outside the timing
    lines = text.count("\n")
    t_parse = best(lambda: parse_text(text, file), repeat)
    t_lark = best(lambda: _parser().parse(text + "\n"), repeat)
    t_lex = best(lambda: sum(1 for _ in TOKEN.finditer(text)), repeat)
    print(f"{name}: {lines} lines, {tokens(text)} tokens, {len(text) / 1024:.1f} KiB")
    print(f"  parse_text   {t_parse * 1e3:8.2f} ms   {t_parse / lines * 1e6:7.1f} us/line")
    print(f"  lark only    {t_lark * 1e3:8.2f} ms   parse_text / lark = {t_parse / t_lark:5.2f}")
    print(f"  lex only     {t_lex * 1e3:8.2f} ms   parse_text / lex  = {t_parse / t_lex:5.1f}")
    if with_read:
        from loopwise.testing import prepare_text
        t_read = best(lambda: prepare_text(text, file), repeat)
        print(f"  read (prepare_text) {t_read * 1e3:8.2f} ms   parse share = {t_parse / t_read:5.1%}")


START = {  # the same imports and the same first parse; only the parser's tables differ
    "shipped": "",
    "built": "P.load_parser = build_parser\n",
    "lark cache": ("P.load_parser = lambda: Lark(grammar_text(), parser='lalr', propagate_positions=True,"
                   " maybe_placeholders=False, cache=CACHE)\n"),
}
PROLOGUE = ("from lark import Lark\nimport loopwise.language.parse as P\n"
            "from loopwise.language.tables import build_parser, grammar_text\n")


def start_up(kind: str, starts: int, cache: str) -> float:
    """Median seconds from the first import to the first parse, in fresh interpreters."""
    code = ("import time\nt0 = time.perf_counter()\nCACHE = " + repr(cache) + "\n" + PROLOGUE + START[kind] +
            "P.parse_text('x = y')\nprint(time.perf_counter() - t0)")
    times = []
    for _ in range(starts):
        out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True)
        times.append(float(out.stdout))
    return statistics.median(times)


def measure_start_up(starts: int) -> None:
    with tempfile.TemporaryDirectory(prefix="loopwise-bench-") as private:
        cache = str(Path(private) / "tables.lark-cache")
        start_up("lark cache", 1, cache)  # warm the reference's cache
        t = {kind: start_up(kind, starts, cache) for kind in START}
    print(f"start-up, import to first parse (median of {starts} fresh interpreters)")
    print(f"  shipped tables {t['shipped'] * 1e3:8.1f} ms")
    print(f"  built          {t['built'] * 1e3:8.1f} ms   shipped / built      = {t['shipped'] / t['built']:5.2f}")
    print(f"  lark cache     {t['lark cache'] * 1e3:8.1f} ms   shipped / lark cache = "
          f"{t['shipped'] / t['lark cache']:5.2f}")


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--repeat", type=int, default=20, help="timings per figure (median)")
    ap.add_argument("--lines", type=int, default=1000, help="lines of the generated model")
    ap.add_argument("--starts", type=int, default=9, help="fresh interpreters per start-up figure")
    args = ap.parse_args()

    measure_start_up(args.starts)

    demos = sorted((ROOT / "models").glob("*.loop"), key=lambda p: p.stat().st_size)
    largest = demos[-1]
    measure(f"largest demo model ({largest.relative_to(ROOT)})", largest.read_text("utf-8"),
            str(largest), args.repeat, with_read=True)
    text = generated_model(args.lines)
    assert text.count("\n") == args.lines
    measure(f"generated model", text, "generated.loop", max(3, args.repeat // 4), with_read=False)
    demo_text = largest.read_text("utf-8")
    per_token_demo = best(lambda: parse_text(demo_text, str(largest)), args.repeat) / tokens(demo_text)
    per_token_gen = best(lambda: parse_text(text, "generated.loop"), 3) / tokens(text)
    print(f"per token: demo {per_token_demo * 1e6:.1f} us, generated {per_token_gen * 1e6:.1f} us; "
          f"ratio {per_token_gen / per_token_demo:4.2f} (1.0 is linear in the number of tokens)")


if __name__ == "__main__":
    main()
