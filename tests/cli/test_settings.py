"""The settings file: every documented form loads, every value is checked, and a
mistake is a located error (file:line:col of the key, the line, a caret, a hint;
exit 2), never a silent default or an internal error.
"""
from __future__ import annotations

import math
import re
import tomllib
from dataclasses import fields
from pathlib import Path

import pytest

from loopwise.settings import Regression, Settings, SettingsError, load_settings, load_settings_file

from .conftest import GOOD, loopwise, write

ROOT = Path(__file__).resolve().parents[2]
CI_DOC = (ROOT / "docs" / "ci.md").read_text(encoding="utf-8")


def _doc_examples() -> list[tuple[str, str]]:
    """(file name, text) of every complete settings example in docs/ci.md."""
    section = CI_DOC.split("## Settings for the whole project")[1].split("\n## ")[0]
    blocks = re.findall(r"```toml\n(.*?)```", section, flags=re.S)
    return [(b.split("\n", 1)[0].lstrip("# ").strip(), b) for b in blocks]


EXAMPLES = _doc_examples()


def test_the_docs_give_an_example_of_each_form():
    assert [name for name, _ in EXAMPLES] == ["pyproject.toml", "loopwise.toml", "loopwise.toml"]
    assert "[tool.loopwise]" in EXAMPLES[2][1] and "[tool.loopwise]" not in EXAMPLES[1][1]


@pytest.mark.parametrize("name, text", EXAMPLES, ids=["pyproject", "loopwise-top-level", "loopwise-tool-table"])
def test_each_documented_form_loads_to_the_same_settings(tmp_path, name, text):
    path = write(tmp_path, name, text)
    settings = load_settings(tmp_path)
    assert settings.source == str(path)
    assert settings.requirements == ("* phase_margin >= 45deg", "* gain_margin >= 6dB")
    assert (settings.include, settings.exclude) == (("models/**/*.loop",), ("models/scratch/**",))
    assert settings.fail_on_warnings is True
    assert settings.regression == Regression(5.0, 2.0, 0.2)
    (w,) = settings.waivers
    assert (w.code, w.at, w.files) == ("LW382", "balance", ("models/tanks/*.loop",))
    assert w.reason == "balance pipe between the tanks, not a control loop"
    assert tmp_path.joinpath(name).read_text().split("\n")[w.span.line - 1].startswith("code =")
    assert load_settings_file(path) == settings


def test_a_documented_form_runs_a_check(tmp_path):
    # the third form failed before with "unknown setting(s) tool"
    write(tmp_path, "loopwise.toml", EXAMPLES[2][1])
    write(tmp_path, "models/m.loop", GOOD)
    proc = loopwise("check", "models", cwd=tmp_path)
    assert proc.returncode == 0, proc.stderr
    # the default requirements from the settings were applied: 3 per break
    assert "requirements 3/3 met" in proc.stdout


def test_the_documented_error_is_what_the_command_prints(tmp_path):
    shown = CI_DOC.split("## Settings for the whole project")[1].split("```text\n")[1].split("```")[0]
    write(tmp_path, "loopwise.toml", EXAMPLES[1][1].replace("phase_margin_loss_deg = 5.0", "phase_margin_loss_deg = nan"))
    write(tmp_path, "m.loop", GOOD)
    proc = loopwise("check", "m.loop", cwd=tmp_path)
    assert proc.returncode == 2
    # the settings file is named relative to the working directory, as the docs show it
    assert proc.stderr.removeprefix("loopwise: ") == shown


# --- every value is checked, each mistake located --------------------------------------------

CASES = [
    # (settings text, code, line, col, words in the message, words in the hint)
    ("[regression]\nphase_margin_loss_deg = nan\n", "LW012", 2, 1, "finite", "switch"),
    ("[regression]\ngain_margin_loss_db = inf\n", "LW012", 2, 1, "finite", "switch"),
    ("[regression]\ngain_margin_loss_db = -1.0\n", "LW012", 2, 1, "0 or more", "switch"),
    ("[regression]\nphase_margin_loss_deg = 200\n", "LW012", 2, 1, "0 to 180", "switch"),
    ("[regression]\ndelay_margin_loss_fraction = 20\n", "LW012", 2, 1, "0.2 is 20%", "switch"),
    ("[regression]\ngain_margin_loss_db = \"2\"\n", "LW012", 2, 1, "not str", "switch"),
    ("[regression]\nverdict_to_unstable = 1\n", "LW012", 2, 1, "true or false", "true or false"),
    ("regression = { gain_margin_loss_db = nan }\n", "LW012", 1, 16, "finite", "switch"),
    ("regression.gain_margin_loss_db = nan\n", "LW012", 1, 12, "finite", "switch"),
    ("[regression]\nphase_margin_los_deg = 3\n", "LW011", 2, 1, "unknown setting", "phase_margin_loss_deg"),
    ("regression = 3\n", "LW012", 1, 1, "must be a table", "[tool.loopwise.regression]"),
    ("fail_on_warning = true\n", "LW011", 1, 1, "unknown setting", "did you mean `fail_on_warnings`"),
    ('fail_on_warnings = "yes"\n', "LW012", 1, 1, "true or false", "no quotes"),
    ("include = [1]\n", "LW012", 1, 1, "list of strings", "models/**/*.loop"),
    ('# a comment\ninclude = ["models/[z-a]*.loop"]\n', "LW013", 2, 12, "not a valid glob", "range, low to high"),
    ('exclude = ["ok/**", ""]\n', "LW013", 1, 21, "empty glob", "globs use"),
    ("x = = 3\n", "LW010", 1, 5, "not valid TOML", "toml.io"),
    ("[tool.other]\nx = 1\n", "LW011", 1, 1, "`tool` is not a loopwise setting", "top level"),
    ("fail_on_warnings = true\n[tool.loopwise]\ninclude = []\n", "LW011", 1, 1, "outside [tool.loopwise]", "not both"),
    ('[[waive]]\nfiles = "*.loop"\ncode = "LW382"\n', "LW012", 1, 1, "needs `reason`", "reason ="),
    ('[[waive]]\nfiles = "*.loop"\ncode = "LW382"\nreason = "ok"\n[[waive]]\nfiles = "*.loop"\ncode = "W302"\nreason = "x"\n',
     "LW250", 7, 1, "unknown diagnostic code", "old spelling of `LW382`"),
    ('[[waive]]\nfiles = "*.loop"\ncode = "LW301"\nreason = "x"\n', "LW251", 3, 1, "errors cannot be waived", "fix"),
    ('[[waive]]\nfiles = "*.loop"\ncode = "LW382"\nreason = " "\n', "LW252", 4, 1, "needs a reason", "reason ="),
    ('[[waive]]\nfiles = "*.loop"\ncode = "LW382"\nreason = "x"\nbecause = "y"\n', "LW011", 5, 1, "`because`", "files, code"),
    ('[[waive]]\nfiles = []\ncode = "LW382"\nreason = "x"\n', "LW012", 2, 1, "at least one glob", "**/*.loop"),
    ('[[waive]]\nfiles = "*.loop"\ncode = "LW382"\nat = "a b"\nreason = "x"\n', "LW012", 4, 1, "name", "letters"),
]


@pytest.mark.parametrize("text, code, line, col, message, hint", CASES, ids=[f"{c[1]}-{i}" for i, c in enumerate(CASES)])
def test_a_bad_setting_is_a_located_error(tmp_path, text, code, line, col, message, hint):
    path = write(tmp_path, "loopwise.toml", text)
    with pytest.raises(SettingsError) as info:
        load_settings(tmp_path)
    f = info.value.finding
    rendered = str(info.value).split("\n")
    assert (f.code, f.span.file, f.span.line, f.span.col) == (code, str(path), line, col), rendered
    assert message in f.message and hint in f.hint, rendered
    assert rendered[0] == f"{path}:{line}:{col}: error {code} {f.message}"
    assert rendered[1] == "    " + text.split("\n")[line - 1]
    assert rendered[2].index("^") == 4 + col - 1
    assert rendered[-1].startswith("    hint: ")


def test_the_same_mistake_in_pyproject_is_located_there(tmp_path):
    path = write(tmp_path, "pyproject.toml", "[project]\nname = 'x'\n\n[tool.loopwise.regression]\n"
                 "gain_margin_loss_db = nan\n")
    with pytest.raises(SettingsError) as info:
        load_settings(tmp_path)
    assert (info.value.finding.span.file, info.value.finding.span.line) == (str(path), 5)


def test_a_bad_glob_through_the_command_names_its_file(tmp_path):
    # before: "internal error (error: bad character range z-a ...)" naming no file
    write(tmp_path, "loopwise.toml", 'include = ["[z-a]*.loop"]\n')
    write(tmp_path, "m.loop", GOOD)
    proc = loopwise("check", ".", cwd=tmp_path)
    assert proc.returncode == 2
    assert "loopwise.toml:1:12: error LW013" in proc.stderr and "internal error" not in proc.stderr


def test_nan_thresholds_no_longer_switch_the_diff_gate_off(tmp_path):
    # before: a clear regression (phase margin 55.9 -> about 12 deg) exited 0 with NaN thresholds
    write(tmp_path, "old.loop", GOOD)
    write(tmp_path, "new.loop", GOOD.replace("10/((s+1)*(s+2))", "10/((s+1)*(s+2)*(0.4*s+1))"))
    assert loopwise("diff", "old.loop", "new.loop", cwd=tmp_path).returncode == 1
    write(tmp_path, "loopwise.toml", "[regression]\nphase_margin_loss_deg = nan\ngain_margin_loss_db = nan\n"
                                     "delay_margin_loss_fraction = nan\n")
    proc = loopwise("diff", "old.loop", "new.loop", cwd=tmp_path)
    assert proc.returncode == 2
    assert "loopwise.toml:2:1: error LW012 regression setting `phase_margin_loss_deg`" in proc.stderr


# --- where a diff's margin loss matters: distances and levels checked like the thresholds ----------

RELEVANCE_CASES = [
    # (the line under [regression], words in the message)
    ("near_requirement_deg = nan", "finite"),
    ("near_requirement_deg = 200", "0 to 180"),
    ("near_requirement_db = -1", "0 or more"),
    ("near_requirement_db = inf", "finite"),
    ("near_requirement_fraction = 20", "0.2 is 20%"),
    ("relevant_phase_margin_deg = -10", "0 to 180"),
    ("relevant_phase_margin_deg = 181", "0 to 180"),
    ("relevant_gain_margin_db = nan", "finite"),
    ("relevant_delay_margin_s = -0.5", "0 or more"),
    ('relevant_delay_margin_s = "1"', "not str"),
    ("relevant_gain_margin_db = true", "not bool"),
]


@pytest.mark.parametrize("line, message", RELEVANCE_CASES, ids=[c[0].split()[0] + f"-{i}"
                                                                for i, c in enumerate(RELEVANCE_CASES)])
def test_a_bad_relevance_setting_is_a_located_error(tmp_path, line, message):
    path = write(tmp_path, "loopwise.toml", f"[regression]\n{line}\n")
    with pytest.raises(SettingsError) as info:
        load_settings(tmp_path)
    f = info.value.finding
    assert (f.code, f.span.file, f.span.line, f.span.col) == ("LW012", str(path), 2, 1), str(info.value)
    assert f"regression setting `{line.split()[0]}`" in f.message and message in f.message, f.message
    assert "where a loss matters" in f.hint, f.hint
    with pytest.raises(ValueError, match="regression setting"):  # the same rule for settings made in code
        Regression(**tomllib.loads(f"{line}\n"))


def test_relevance_settings_at_the_ends_of_their_ranges_are_taken():
    ends = {"near_requirement_deg": 180, "near_requirement_db": 0, "near_requirement_fraction": 1,
            "relevant_phase_margin_deg": 180, "relevant_gain_margin_db": 0, "relevant_delay_margin_s": 1e6}
    assert {k: getattr(Regression(**ends), k) for k in ends} == ends


# --- settings made in code are checked too ---------------------------------------------------------

@pytest.mark.parametrize("kwargs", [{"phase_margin_loss_deg": math.nan}, {"gain_margin_loss_db": -1.0},
                                    {"delay_margin_loss_fraction": 1.5}, {"verdict_to_unstable": "yes"}])
def test_regression_thresholds_are_checked_in_code(kwargs):
    with pytest.raises(ValueError, match="regression setting"):
        Regression(**kwargs)


def test_settings_made_in_code_are_checked():
    with pytest.raises(ValueError, match="not a valid glob"):
        Settings(include=("[z-a]",))
    with pytest.raises(TypeError):
        Settings(include="models/**")
    with pytest.raises(TypeError):
        Settings(fail_on_warnings="no")
    assert "raw" not in {f.name for f in fields(Settings)}  # dead since nothing read it (issue 14)


@pytest.mark.parametrize("overrides, error, words", [
    ({"J": 1.0}, TypeError, "tuple of (param name, number) pairs"),
    ((("J", "2.4e-4"),), TypeError, "`J`: the value must be a number, not str"),
    ((("J", True),), TypeError, "not bool"),
    ((("J", 1.0, 2.0),), TypeError, "pairs"),
    ((("2J", 1.0),), ValueError, "`2J` is not a param name"),
    ((("J", math.inf),), ValueError, "`J` must be a finite number, not inf"),
    ((("J", 1.0), ("J", 2.0)), ValueError, "set `J` more than once"),
])
def test_params_set_in_code_are_checked_like_every_other_setting(overrides, error, words):
    with pytest.raises(error) as info:
        Settings(overrides=overrides)
    assert words in str(info.value) and "Settings.overrides" in str(info.value)
    assert Settings(overrides=(("J", 2.4e-4), ("Td", 150e-6))).overrides[1] == ("Td", 150e-6)


def test_the_toml_reader_is_in_the_standard_library_of_every_python_allowed():
    # settings.py imports tomllib, which the standard library has from Python 3.11 on
    requires = tomllib.loads((ROOT / "pyproject.toml").read_text())["project"]["requires-python"]
    low = tuple(int(x) for x in re.match(r">=\s*(\d+)\.(\d+)", requires).groups())
    assert low >= (3, 11), requires


@pytest.mark.parametrize("option, value, words", [
    ("--max-delay-loss", "20", "0.2 is 20%"),         # a percentage written as a fraction
    ("--max-phase-loss", "200", "0 to 180"),
    ("--max-phase-loss", "nan", "finite"),
    ("--max-gain-loss", "inf", "finite"),
])
def test_diff_options_follow_the_same_rule_as_the_settings(tmp_path, cli, option, value, words):
    # before this rule was shared, an out-of-range option reached Regression and was an internal error
    write(tmp_path, "a.loop", GOOD)
    code, _, err = cli("diff", "a.loop", "a.loop", option, value)
    assert code == 2 and words in err and "internal error" not in err, err
    assert err.startswith(f"loopwise: argument {option}: ")
