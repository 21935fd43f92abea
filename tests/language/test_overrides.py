"""Params set from outside the model (`--set NAME=VALUE`, a sweep's samples): the
resolver re-evaluates everything that depends on them from the parsed tree."""
from __future__ import annotations

import dataclasses
import pickle

import numpy as np
import pytest

from loopwise.errors import ModelErrors, render
from loopwise.language.resolve import parse_model, resolve_parsed, resolve_text

MODEL = """model m
param K = 2 in [1, 3]
param Kd = 3*K
input r
block G = Kd/((s+1)*(s+2))
e = r - y
y = G(e)
break b at y
"""


def gain_of(model) -> float:
    (term,) = model.equations["y"]
    return term.app.transfer.evaluate(np.array([0j]))[0].real * 2.0  # G(0) = Kd / 2


def test_a_set_param_is_used_by_the_params_and_blocks_that_depend_on_it():
    nominal = resolve_text(MODEL)
    assert nominal.params["Kd"].value == 6.0 and gain_of(nominal) == pytest.approx(6.0)
    changed = resolve_text(MODEL, overrides={"K": 2.5})
    # Kd = 3*K is re-evaluated from the tree: 7.5, and the block's gain with it
    assert changed.params["K"].value == 2.5 and changed.params["Kd"].value == 7.5
    assert gain_of(changed) == pytest.approx(7.5)
    assert changed.ranges == {"K": (1.0, 3.0)}
    assert not changed.findings


def test_a_derived_param_can_be_set_itself():
    assert resolve_text(MODEL, overrides={"Kd": 4.0}).params["Kd"].value == 4.0


def test_a_value_outside_the_declared_range_is_used_with_a_note():
    m = resolve_text(MODEL, "m.loop", overrides={"K": 5.0})
    assert m.params["K"].value == 5.0
    (note,) = m.findings
    assert (note.severity, note.code) == ("note", "LW292")
    assert "outside its declared range [1, 3]" in note.message
    assert note.span.line == 2  # at the param's own statement


def test_an_unknown_param_is_a_located_error_with_a_did_you_mean_hint():
    with pytest.raises(ModelErrors) as info:
        resolve_text(MODEL, "m.loop", overrides={"Kp": 1.0})
    (err,) = info.value.errors
    assert err.code == "LW254" and err.span.file == "m.loop"
    assert "no param `Kp`" in err.message and err.hint == "did you mean `K`?"
    assert "m.loop" in render(err.as_finding())


def test_setting_a_block_or_signal_says_only_params_can_be_set():
    with pytest.raises(ModelErrors) as info:
        resolve_text(MODEL, "m.loop", overrides={"G": 1.0, "e": 2.0})
    messages = [e.message for e in info.value.errors]
    assert "`G` is a block, not a param: only params can be set" in messages
    assert "`e` is a signal, not a param: only params can be set" in messages


def test_parse_once_resolve_many_without_the_included_files(tmp_path):
    (tmp_path / "lib").mkdir()
    (tmp_path / "lib" / "plant.loop").write_text("param J = 2 in [1, 4]\nblock P = 1/(J*s + 1)\n")
    top = tmp_path / "top.loop"
    top.write_text('use "lib/plant.loop"\ninput r\ne = r - y\ny = P(e)\nbreak b at y\n')
    parsed = parse_model(top.read_text(), str(top))
    nominal = resolve_parsed(parsed)
    assert nominal.ranges == {"J": (1.0, 4.0)} and len(nominal.sources) == 1
    # the included file's tree travels with the parsed model: no disk needed afterwards
    shipped = pickle.loads(pickle.dumps(parsed.with_sources(nominal)))
    (tmp_path / "lib" / "plant.loop").unlink()
    again = resolve_parsed(shipped, {"J": 3.0})
    (term,) = again.equations["y"]
    np.testing.assert_allclose(term.app.transfer.poles, [-1.0 / 3.0])
    with pytest.raises(ModelErrors):  # without the trees it would need the deleted file
        resolve_parsed(parsed, {"J": 3.0})


def test_a_cycle_is_still_refused_when_the_included_trees_travel_with_the_model(tmp_path):
    # the trees kept for later resolutions go through the same checks as a first reading
    (tmp_path / "a.loop").write_text('use "b.loop"\nparam J = 2\n')
    (tmp_path / "b.loop").write_text("param K = 1\n")
    top = tmp_path / "top.loop"
    top.write_text('use "a.loop"\ninput r\ne = r - y\ny = [J*K/(s + 1)](e)\nbreak b at y\n')
    parsed = parse_model(top.read_text(), str(top))
    shipped = parsed.with_sources(resolve_parsed(parsed))
    # b.loop's tree replaced by one that uses a.loop again: a cycle through the kept trees
    a_stmt, b_stmt = sorted(shipped.sources, key=lambda st: st.path)
    cyclic = parse_model('use "a.loop"\nparam K = 1\n', str(tmp_path / "b.loop")).tree
    sources = {a_stmt: shipped.sources[a_stmt], b_stmt: (shipped.sources[b_stmt][0], cyclic)}
    sources.update({st: shipped.sources[a_stmt] for st in cyclic.statements if hasattr(st, "path")})
    with pytest.raises(ModelErrors) as info:
        resolve_parsed(dataclasses.replace(shipped, sources=sources))
    assert [e.code for e in info.value.errors] == ["LW205"]


def test_the_settings_waivers_travel_with_the_parsed_model(tmp_path):
    from loopwise.analysis import check_model, parse_for_check
    from loopwise.settings import Settings
    from loopwise.waivers import Waiver
    from loopwise.errors import Span

    path = tmp_path / "m.loop"
    path.write_text(MODEL.replace("block G", "block H = 1/(s + 5)\nblock G"))  # H is never used: LW282
    waiver = Waiver("LW282", "kept for later", Span("loopwise.toml", 3, 1), "H", ("*.loop",))
    settings = Settings(source=str(tmp_path / "loopwise.toml"), waivers=(waiver,))
    parsed = parse_for_check(path, settings)
    assert parsed.waivers == (waiver,)
    shipped = pickle.loads(pickle.dumps(parsed))
    result = check_model(resolve_parsed(shipped, {"K": 2.5}))
    (unused,) = [f for f in result.findings if f.code == "LW282"]
    assert unused.waiver == waiver and not unused.counts
    # without the settings it counts
    (bare,) = [f for f in check_model(resolve_parsed(parse_for_check(path), {"K": 2.5})).findings
               if f.code == "LW282"]
    assert bare.counts
