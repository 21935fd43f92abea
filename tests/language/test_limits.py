"""Limits that bound the time and memory of reading any input under the 4 MiB size
limit (tokens per model, order per transfer), and arithmetic that overflows.

Inputs that took minutes before the limits existed run in a subprocess with a hard
timeout: a regression fails at the timeout instead of stalling the suite. No test
times anything (speed belongs in bench/).
"""
from __future__ import annotations

import subprocess
import sys
import textwrap
from pathlib import Path

import pytest

from loopwise.errors import ModelError, ModelErrors
from loopwise.language.evaluate import MAX_ORDER
from loopwise.language.parse import MAX_TOKENS, count_tokens, parse_text
from loopwise.language.resolve import resolve_file, resolve_text
from loopwise.language.source import MAX_MODEL_BYTES

from .conftest import assert_rendered, resolve_errors

ROOT = Path(__file__).resolve().parents[2]


# --- tokens -----------------------------------------------------------------------------------

def test_token_count_includes_comments_and_line_ends():
    # param a = 1.5e-3 # note \n use "x.loop" \n
    assert count_tokens('param a = 1.5e-3   # note\nuse "x.loop"\n', 100) == (9, None)
    assert count_tokens("a b c d", 2) == (2, 4)  # stops at the first token past the limit


def test_a_file_at_the_limit_parses_and_one_token_more_is_refused():
    line = "param a = 1\n"  # 5 tokens
    text = line * (MAX_TOKENS // 5)
    assert count_tokens(text, MAX_TOKENS + 1)[0] == MAX_TOKENS
    assert len(parse_text(text, "m.loop").statements) == MAX_TOKENS // 5
    text += "x"
    with pytest.raises(ModelError) as info:
        parse_text(text, "m.loop")
    err = info.value
    assert (err.code, err.span.line, err.span.col) == ("LW108", MAX_TOKENS // 5 + 1, 1)
    assert err.message == f"too large to read: the file holds more than {MAX_TOKENS:,} tokens"
    assert_rendered(err, text)


def _in_subprocess(code: str, timeout: float = 120) -> str:
    proc = subprocess.run([sys.executable, "-c", textwrap.dedent(code)], capture_output=True, text=True,
                          timeout=timeout)
    assert proc.returncode == 0, proc.stderr
    return proc.stdout.strip()


def test_a_4_mib_one_line_sum_is_refused_before_parsing(tmp_path):
    # regression: 76 s and 2.7 GB before LW107
    path = tmp_path / "sum.loop"
    terms = (MAX_MODEL_BYTES - 100) // 4
    path.write_text("input a\nx = " + " + ".join(["a"] * terms) + "\n")
    out = _in_subprocess(f"""
        from loopwise.language.resolve import resolve_file
        from loopwise.errors import ModelError
        try:
            resolve_file({str(path)!r})
        except ModelError as err:
            print(err.code, err.span.line)
        """)
    assert out == "LW108 2"


def test_a_valid_4_mib_file_of_short_sums_is_refused_before_parsing(tmp_path):
    # regression: 264 s and 3.7 GB (parsed, resolved, then the engine on 300,000 signals)
    path = tmp_path / "sums.loop"
    lines, size, i = ["input r0", "x0 = r0 + r0"], 0, 1
    while size < MAX_MODEL_BYTES - 100:
        lines.append(f"x{i} = r0 + x{i - 1}")
        size += len(lines[-1]) + 1
        i += 1
    path.write_text("\n".join(lines[:-1]) + "\n")
    out = _in_subprocess(f"""
        from loopwise.run import check_paths
        run = check_paths([{str(path)!r}])
        print([(e.code, e.span.line) for e in run.errors], len(run.models))
        """)
    assert out.startswith("[('LW108', ") and out.endswith(" 0")


def test_includes_share_the_model_token_budget(tmp_path):
    (tmp_path / ".git").mkdir()
    half = "param a{} = 1\n"
    (tmp_path / "lib.loop").write_text("".join(half.format(i) for i in range(MAX_TOKENS // 5 // 2 + 10)))
    model = tmp_path / "m.loop"
    model.write_text('use "lib.loop"\n' + "".join(f"param b{i} = 1\n" for i in range(MAX_TOKENS // 5 // 2))
                     + "input r\ne = r - y\ny = [1/(s+1)](e)\nbreak b at y\n")
    with pytest.raises((ModelError, ModelErrors)) as info:
        resolve_file(model)
    errs = info.value.errors if isinstance(info.value, ModelErrors) else [info.value]
    err = errs[0]
    assert err.code == "LW108" and err.span.file.endswith("lib.loop")
    assert err.message == f"too large to read: the model and the files it uses hold more than {MAX_TOKENS:,} tokens"


# --- the order of a transfer --------------------------------------------------------------------

def test_power_beyond_the_order_limit():
    err = resolve_errors(f"block B = 1/(s+1)^{MAX_ORDER + 1}\n")[0]
    assert err.code == "LW223" and err.message == f"powers of a transfer must be whole numbers (at most {MAX_ORDER})"


def test_power_of_a_sum_beyond_the_order_limit_is_refused_before_it_is_computed():
    err = resolve_errors(f"block B = (1/(s+1) + 1/(s+2))^{MAX_ORDER}\n")[0]
    assert (err.code, err.span.col) == ("LW233", 11)
    assert err.message == f"the transfer would have {2 * MAX_ORDER} poles or zeros (the limit is {MAX_ORDER})"


def test_order_at_the_limit_is_accepted():
    m = resolve_text(f"input r\nblock B = 1/(s+1)^{MAX_ORDER}\ny = B(r)\n", "m.loop")
    assert m.blocks["B"].transfer.poles.size == MAX_ORDER


def test_sum_of_high_order_transfers_is_refused():
    # regression: 973 tokens took 3 s and 165 MB, then a numpy LinAlgError escaped
    k = MAX_ORDER // 2
    text = f"block B = (1/(s+1)+1/(s+2))^{k // 2} * (1/(s+3)+1/(s+4))^{k // 2} + 1/(s+5)^{k}\n"
    err = resolve_errors(text)[0]
    assert err.code == "LW233"


def test_transfer_whose_coefficients_overflow():
    # regression: numpy's LinAlgError ("Array must not contain infs or NaNs") escaped
    err = resolve_errors("block B = 1/(s+1e200)^16 + 1/(s+1)\n")[0]
    assert (err.code, err.span.line, err.span.col) == ("LW106", 1, 11)  # one code for every overflow
    assert "overflow" in err.message


# --- constant arithmetic that overflows ----------------------------------------------------------

@pytest.mark.parametrize("text, line, col", [
    ("param a = 1e300*1e300\n", 1, 11),
    ("param a = 1e200/1e-200\n", 1, 11),
    ("param a = 1e300\nparam b = -a*a\n", 2, 11),
    ("param a = (1e300 + 1e300)*10\n", 1, 12),      # the sum is past 1e300 already
    ("input e\ny = 1e300*1e300*e\n", 2, 5),          # regression: an internal error in the engine
    ("input e\ny = 1e200*(1e200*e)\n", 2, 5),         # a signal scaled twice
    ("input e\nblock G = 1e300*1e300/(s+1)\ny = G(e)\n", 2, 11),
])
def test_constant_overflow_is_a_located_error(text, line, col):
    err = resolve_errors(text)[0]
    assert (err.code, err.span.line, err.span.col) == ("LW106", line, col)
    assert err.message == "the value overflows: it is not a finite number"
    assert_rendered(err, text)


def test_a_full_check_of_an_overflowing_gain_is_a_located_error():
    from loopwise.analysis import check_text

    with pytest.raises((ModelError, ModelErrors)) as info:
        check_text("input r\ne = r - y\ny = [1/(s+1)](1e300*1e300*e)\nbreak b at y\n", "m.loop")
    errs = info.value.errors if isinstance(info.value, ModelErrors) else [info.value]
    assert [(e.code, e.span.line) for e in errs] == [("LW106", 3)]


# --- the limits are documented ---------------------------------------------------------------------

def test_limits_are_documented():
    text = (ROOT / "docs" / "language.md").read_text("utf-8")
    assert f"{MAX_TOKENS:,} tokens" in text
    assert f"{MAX_ORDER} poles" in text
