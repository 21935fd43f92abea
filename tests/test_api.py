"""The library's public functions: one error type for every unreadable model, and
every argument checked before any work (a wrong type is a TypeError, a wrong
value a ValueError) so that no call gives a verdict from a misread argument.
"""
from __future__ import annotations

import pickle
from pathlib import Path

import pytest

import loopwise
from loopwise.analysis import check_file, check_text
from loopwise.testing import analyse_loop, nyquist_verdict
from loopwise.errors import ModelError, ModelErrors
from loopwise.run import check_paths
from loopwise.settings import Settings
from loopwise.transfer import Transfer

#: L = 1/(s^2 (s+1)), unity negative feedback: s^3 + s^2 + 1 has two roots in the right
#: half plane (Routh: first column 1, 1, -1, 1 changes sign twice), so Z = 2.
#: With the contour indented to the left of the double pole at 0, P = 2 and the
#: verdict is still Z = 2 - but only when the caller asked for "left" on purpose.
DOUBLE_INTEGRATOR = "input r\nblock G = 1/(s^2*(s+1))\ne = r - y\ny = G(e)\nbreak b at y\n"


# --- one error type -----------------------------------------------------------------------

@pytest.mark.parametrize("text, codes", [
    ("block G = 1/(s+1))\n", ["LW101"]),                                   # syntax
    ("input r\ne = r - y\ny = G(e)\nbreak b at y\nz = q\n", ["LW227", "LW218"]),  # meaning, two errors
    ("input r\ne = r - y\ny = [2*exp(-s)](e)\nbreak b at y\n", ["LW401"]),  # the engine (neutral loop)
])
def test_every_unreadable_model_raises_loopwise_model_error(text, codes):
    with pytest.raises(loopwise.ModelError) as info:
        check_text(text, "m.loop")
    exc = info.value
    assert isinstance(exc, ModelErrors)  # the older name still catches it, for one release
    assert exc.errors and all(e.span.file == "m.loop" and e.span.line >= 1 and e.hint for e in exc.errors)
    assert [e.code for e in exc.errors] == codes
    assert [f.code for f in exc.findings] == [e.code for e in exc.errors]
    assert (exc.code, exc.span) == (exc.errors[0].code, exc.errors[0].span)


def test_a_syntax_error_is_caught_by_the_readme_example(tmp_path):
    # before: a syntax error raised a ModelError that `except ModelErrors` missed
    path = tmp_path / "m.loop"
    path.write_text("block G = 1/(s+1))\n")
    try:
        check_file(path)
    except loopwise.ModelError as exc:
        located = [(e.span.line, e.span.col, e.code) for e in exc.errors]
    assert located == [(1, 18, "LW101")]
    with pytest.raises(ModelErrors):
        check_file(path)


def test_model_errors_pickle_with_their_fields():
    with pytest.raises(ModelError) as info:
        check_text("input r\ne = r - y\ny = G(e)\nbreak b at y\nz = q\n", "m.loop")
    back = pickle.loads(pickle.dumps(info.value))
    assert [(e.code, e.span, e.hint) for e in back.errors] == [(e.code, e.span, e.hint) for e in info.value.errors]


def test_the_readme_example_reads_a_model_and_catches_a_syntax_error(tmp_path, monkeypatch, capsys):
    root = Path(__file__).resolve().parents[1]
    readme = (root / "README.md").read_text()
    example = readme.split("## As a library")[1].split("```python\n")[1].split("```")[0]
    assert "except loopwise.ModelError" in example and loopwise.ModelError is ModelError
    monkeypatch.chdir(root)
    exec(compile(example, "README.md", "exec"), {})
    assert capsys.readouterr().out.startswith("servo_axis stable")
    (tmp_path / "models").mkdir()
    (tmp_path / "models" / "servo_axis.loop").write_text("block G = 1/(s+1))\n")
    monkeypatch.chdir(tmp_path)
    with pytest.raises(SystemExit) as info:
        exec(compile(example, "README.md", "exec"), {})
    assert info.value.code == 2
    assert capsys.readouterr().out.startswith("models/servo_axis.loop:1:18: LW101")


# --- arguments ----------------------------------------------------------------------------

@pytest.mark.parametrize("indent", ["Right", "LEFT", "r", "", " right"])
def test_an_indent_other_than_right_or_left_is_refused(indent):
    # before: "Right" was taken for "left" and 1/(s^2 (s+1)) came out stable
    with pytest.raises(ValueError, match="'right' or 'left'"):
        check_text(DOUBLE_INTEGRATOR, indent=indent)


def test_both_indents_give_the_right_verdict():
    for indent in ("right", "left"):
        result = check_text(DOUBLE_INTEGRATOR, indent=indent)
        assert (result.stable, result.closed_loop_rhp_poles) == (False, 2), indent


@pytest.mark.parametrize("call, error, words", [
    (lambda: check_text(DOUBLE_INTEGRATOR.encode()), TypeError, "decode"),
    (lambda: check_text([DOUBLE_INTEGRATOR]), TypeError, "not list"),
    (lambda: check_text(Path("m.loop")), TypeError, "check_file"),
    (lambda: check_text(None), TypeError, "not NoneType"),
    (lambda: check_text(DOUBLE_INTEGRATOR, file=3), TypeError, "file must be"),
    (lambda: check_text(DOUBLE_INTEGRATOR, settings={"fail_on_warnings": True}), TypeError, "Settings"),
    (lambda: check_text(DOUBLE_INTEGRATOR, indent=None), TypeError, "indent"),
    (lambda: check_file(b"m.loop"), TypeError, "bytes"),
    (lambda: check_file(["m.loop"]), TypeError, "not list"),
    (lambda: check_file(""), ValueError, "empty"),
    (lambda: check_file("m.loop", indent="Left"), ValueError, "lower case"),
    (lambda: check_paths(b"models"), TypeError, "bytes"),
    (lambda: check_paths(42), TypeError, "not int"),
    (lambda: check_paths([]), ValueError, "at least one"),
    (lambda: check_paths(["m.loop", 3]), TypeError, "each of paths"),
    (lambda: check_paths(["m.loop"], jobs=-1), ValueError, "jobs"),
    (lambda: check_paths(["m.loop"], jobs=2.0), TypeError, "jobs"),
    (lambda: check_paths(["m.loop"], jobs=True), TypeError, "jobs"),
    (lambda: check_paths(["m.loop"], progress="yes"), TypeError, "progress"),
    (lambda: check_paths(["m.loop"], settings="loopwise.toml"), TypeError, "Settings"),
    (lambda: analyse_loop("1/(s+1)"), TypeError, "Transfer"),
    (lambda: analyse_loop(Transfer.from_coeffs([1.0], [1.0, 1.0]), name=""), ValueError, "name"),
    (lambda: analyse_loop(Transfer.from_coeffs([1.0], [1.0, 1.0]), indent="Right"), ValueError, "indent"),
    (lambda: nyquist_verdict([1.0], indent="right"), TypeError, "Transfer"),
    (lambda: nyquist_verdict(Transfer.from_coeffs([1.0], [1.0, 0.0]), indent="LEFT"), ValueError, "indent"),
])
def test_a_wrong_argument_is_refused_with_a_clear_error(call, error, words):
    with pytest.raises(error, match=words.replace("(", r"\(")):
        call()


def test_check_paths_takes_one_path_as_one_path(tmp_path):
    # before: a single str was iterated character by character
    (tmp_path / "m.loop").write_text(DOUBLE_INTEGRATOR)
    run = check_paths(str(tmp_path / "m.loop"))
    assert [m.closed_loop_rhp_poles for m in run.models] == [2]
    assert check_paths(tmp_path, Settings()).models[0].file == str(tmp_path / "m.loop")


def test_paths_as_path_objects_are_accepted(tmp_path):
    (tmp_path / "m.loop").write_text(DOUBLE_INTEGRATOR)
    assert check_file(tmp_path / "m.loop").closed_loop_rhp_poles == 2
    assert check_text(DOUBLE_INTEGRATOR, file=tmp_path / "x.loop").file == str(tmp_path / "x.loop")
