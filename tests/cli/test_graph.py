"""`loopwise graph`: the model's structure as text and as Graphviz DOT."""
from __future__ import annotations

import re
import subprocess
import sys
from pathlib import Path

import networkx as nx

from loopwise.cli import main
from tests.scenarios import FLOW_LEVEL as SCENARIO

MODELS = Path(__file__).resolve().parents[2] / "models"


def test_structure_of_the_servo_demo(capsys):
    assert main(["graph", str(MODELS / "servo_axis.loop")]) == 0
    out = capsys.readouterr().out
    assert "signals (8): pos_err, spd_ref, spd_err, cur_ref, cur_err, cur, spd, pos" in out
    assert "loops (3):" in out and "cur_err -> cur -> cur_err" in out
    assert re.search(r"current\s+at cur -> cur_err\s+line \d+\s+inside speed", out)
    assert re.search(r"position\s+at pos\s+line \d+\s+outermost", out)
    nesting = out.split("nesting (outer to inner):")[1].splitlines()
    assert [l.rstrip() for l in nesting[1:4]] == ["  position", "    speed", "      current"]


def _parse_dot(text: str) -> nx.DiGraph:
    """A minimal reader for the DOT subset we write (nodes and edges with attributes)."""
    g = nx.DiGraph()
    assert text.startswith("digraph ") and text.rstrip().endswith("}")
    for line in text.splitlines()[1:-1]:
        m = re.match(r'\s*"((?:[^"\\]|\\.)*)" -> "((?:[^"\\]|\\.)*)"(?: \[(.*)\])?;$', line)
        if m:
            g.add_edge(m.group(1), m.group(2), attrs=m.group(3) or "")
            continue
        m = re.match(r'\s*"((?:[^"\\]|\\.)*)" \[(.*)\];$', line)
        if m:
            g.add_node(m.group(1), attrs=m.group(2))
            continue
        assert re.match(r"\s*(rankdir|node)\b", line), line
    return g


def test_dot_output_is_a_well_formed_graph_with_the_breaks_dashed(tmp_path):
    out = tmp_path / "servo.dot"
    assert main(["graph", str(MODELS / "servo_axis.loop"), "--dot", "--output", str(out)]) == 0
    g = _parse_dot(out.read_text())
    assert "pos_ref" in g and "cur" in g
    dashed = {(u, v) for u, v, a in g.edges(data="attrs") if "dashed" in a}
    assert dashed == {("cur", "cur_err"), ("spd", "spd_err"), ("pos", "pos_err")}
    assert len(list(nx.simple_cycles(g))) == 3


def test_graph_of_a_broken_model_exits_2_with_a_located_error(tmp_path, capsys):
    bad = tmp_path / "bad.loop"
    bad.write_text("input r\nblock G = 1/(s+1)\ne = r - y\ny = G(ee)\nbreak b at y\n")
    assert main(["graph", str(bad)]) == 2
    err = capsys.readouterr().err
    assert f"{bad}:4:7: error LW218" in err and "did you mean `e`" in err and "^" in err


def test_graph_through_a_subprocess_has_no_traceback(tmp_path):
    proc = subprocess.run([sys.executable, "-m", "loopwise", "graph", str(tmp_path / "none.loop")],
                          capture_output=True, text=True)
    assert proc.returncode == 2 and "Traceback" not in proc.stderr and "no such file" in proc.stderr


#: the flow loop inside the level loop, its flow sensor with a delay, cut wide at `flow`
FLOW_LEVEL = SCENARIO.format(kl=0.5, kf=2, sensor="exp(-0.05*s)/(0.1*s + 1)", inner="flow")


def test_text_and_dot_show_the_same_nesting_through_a_sensor(tmp_path, capsys):
    model = tmp_path / "flow_level.loop"
    model.write_text(FLOW_LEVEL)
    assert main(["graph", str(model)]) == 0
    out = capsys.readouterr().out
    assert re.search(r"flow\s+at flow\s+line 14\s+inside lvl", out)
    assert re.search(r"lvl\s+at level\s+line 15\s+outermost", out)
    nesting = out.split("nesting (outer to inner):")[1].splitlines()
    assert [l.rstrip() for l in nesting[1:3]] == ["  lvl", "    flow"]
    assert main(["graph", str(model), "--dot"]) == 0
    g = _parse_dot(capsys.readouterr().out)
    labels = {(u, v): a for u, v, a in g.edges(data="attrs") if "dashed" in a}
    # the wide cut at `flow` cuts both uses of it, each labelled with the break around it
    assert set(labels) == {("flow", "flow_meas"), ("flow", "level"), ("level", "el")}
    assert all('xlabel="break flow (inside lvl)"' in labels[e] for e in [("flow", "flow_meas"), ("flow", "level")])
    assert 'xlabel="break lvl"' in labels[("level", "el")]


def test_dot_labels_the_servo_breaks_with_their_enclosing_break():
    from loopwise.analysis import prepare_file
    from loopwise.commands.graph import structure_dot

    g = _parse_dot(structure_dot(prepare_file(MODELS / "servo_axis.loop").diagram))
    labels = {(u, v): a for u, v, a in g.edges(data="attrs") if "dashed" in a}
    assert 'xlabel="break current (inside speed)"' in labels[("cur", "cur_err")]
    assert 'xlabel="break speed (inside position)"' in labels[("spd", "spd_err")]
    assert 'xlabel="break position"' in labels[("pos", "pos_err")]


def test_graph_shows_a_wide_cut_warning_at_its_break(tmp_path, capsys):
    model = tmp_path / "flow_level.loop"
    model.write_text(FLOW_LEVEL)
    assert main(["graph", str(model)]) == 0
    out = capsys.readouterr().out
    assert f"{model}:14:7: warning LW384 `flow` feeds 2 equations" in out
    assert "write `break flow at flow -> flow_meas`" in out and "hint:" in out
    model.write_text(FLOW_LEVEL.replace("break flow at flow\n", "break flow at flow -> flow_meas\n"))
    assert main(["graph", str(model)]) == 0
    assert "LW384" not in capsys.readouterr().out


def test_graph_reads_settings_like_every_command(tmp_path, capsys):
    model = tmp_path / "m.loop"
    model.write_text("# invented\ninput r\nblock G = 2/((s+1)*(s+2))\ne = r - y\ny = G(e)\nbreak b at y\n")
    settings = tmp_path / "loopwise.toml"
    settings.write_text('requirements = ["* phase_margn >= 30deg"]\n')
    assert main(["graph", str(model)]) == 0  # no settings file found from the working folder
    capsys.readouterr()
    # named with --config, its requirements are resolved with the model: the typo is located
    assert main(["graph", str(model), "--config", str(settings)]) == 2
    err = capsys.readouterr().err
    assert "loopwise.toml:1:" in err and "LW243" in err and "phase_margin" in err
    assert main(["graph", str(model), "--config", str(tmp_path / "none.toml")]) == 2
    assert capsys.readouterr().err == f"loopwise: settings file {tmp_path / 'none.toml'} does not exist\n"
