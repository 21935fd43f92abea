"""`loopwise graph FILE`: the model's structure (signals, loops, breaks, nesting), or DOT."""
from __future__ import annotations

import argparse
import sys

from ..errors import ModelError, ModelErrors, render
from .options import add_config, add_output, load_settings_for

__all__ = ["add_parser", "run", "structure_text", "structure_dot"]


def add_parser(sub, help_text: str) -> None:
    """Add `loopwise graph` and its options to the subcommands."""
    p = sub.add_parser("graph", help=help_text, description=help_text,
                       epilog="Exit codes: 0 the structure was printed; 2 the model could not "
                              "be read or a usage mistake.")
    p.add_argument("file", help="a .loop model file")
    p.add_argument("--dot", action="store_true", help="write Graphviz DOT (an open format) instead of text")
    add_output(p, "write to FILE instead of standard output")
    add_config(p, " (its requirements are resolved with the model)")


def _display(name, model) -> str:
    return f"({model.hidden_owner.get(name, name)} input)" if name in model.hidden else name


def structure_text(diagram) -> str:
    """A model's loop graph (`engine.diagram.Diagram`) as text: inputs, signals, loops,
    breaks with the break that encloses each, the nesting as a tree, and the
    structural findings."""
    model = diagram.model
    lines = [f"model {model.name}  ({model.file})", ""]
    shown = [s for s in model.signals if s not in model.hidden]
    lines.append(f"inputs ({len(model.inputs)}): " + (", ".join(model.inputs) or "none"))
    lines.append(f"signals ({len(shown)}): " + ", ".join(shown))
    lines.append("")
    lines.append(f"loops ({len(diagram.cycles)}):")
    for cyc in diagram.cycles:
        names = [n for n in cyc if n not in model.hidden]
        lines.append("  " + " -> ".join(names + names[:1]))
    lines.append("")
    lines.append(f"breaks ({len(diagram.breaks)}):")
    width = max((len(b.stmt.name) for b in diagram.breaks), default=0)
    for b in diagram.breaks:
        enclosed = f"inside {b.enclosed_by}" if b.enclosed_by else "outermost"
        lines.append(f"  {b.stmt.name:<{width}}  at {b.stmt.at:<24} line {b.stmt.span.line:<4} {enclosed}")
    roots = [b for b in diagram.breaks if b.enclosed_by is None]
    if diagram.breaks:
        lines.append("")
        lines.append("nesting (outer to inner):")

        def walk(b, depth):
            lines.append("  " + "  " * depth + b.stmt.name)
            for c in diagram.breaks:
                if c.enclosed_by == b.stmt.name:
                    walk(c, depth + 1)

        for r in roots:
            walk(r, 0)
    for f in (*diagram.findings, *(f for b in diagram.breaks for f in b.findings())):
        lines.append("")
        lines.append(render(f))
    return "\n".join(lines) + "\n"


def _q(name: str) -> str:
    return '"' + name.replace('"', r'\"') + '"'


def structure_dot(diagram) -> str:
    """A model's loop graph as Graphviz DOT: signals as nodes, wiring terms as labelled
    edges, each cut wire dashed and labelled with its break (and the break around it)."""
    model = diagram.model
    # each cut wire is labelled with its break and, for an enclosed break, the break around it
    cut = {e: b.stmt.name + (f" (inside {b.enclosed_by})" if b.enclosed_by else "")
           for b in diagram.breaks for e in b.edges}
    out = [f"digraph {_q(model.name)} {{", "  rankdir=LR;", "  node [fontname=Helvetica];"]
    for name in model.inputs:
        out.append(f"  {_q(name)} [shape=plaintext];")
    for name in model.signals:
        if name in model.hidden:
            out.append(f"  {_q(name)} [shape=point, label=\"\"];")
        else:
            out.append(f"  {_q(name)} [shape=ellipse];")
    for u, v, data in diagram.graph.edges(data=True):
        t = data["term"]
        label = t.app.label.split("@")[0] if t.app else ""
        if t.gain != 1.0:
            label = f"{t.gain:g}" + (f"*{label}" if label else "")
        attrs = [f"label={_q(label)}"] if label else []
        if (u, v) in cut:
            attrs += ["style=dashed", f"xlabel={_q('break ' + cut[(u, v)])}"]
        out.append(f"  {_q(u)} -> {_q(v)}" + (f" [{', '.join(attrs)}]" if attrs else "") + ";")
    out.append("}")
    return "\n".join(out) + "\n"


def run(args: argparse.Namespace) -> int:
    """Print the structure of one model (text, or DOT with `--dot`); 0, or 2 when the
    model cannot be read."""
    from ..analysis import prepare_file
    from ..output import emit, guard_inputs

    settings = load_settings_for(args)
    protected = guard_inputs(args.output, [args.file], settings)
    try:
        prep = prepare_file(args.file, settings)
    except ModelErrors as exc:
        for e in exc.errors:
            print(render(e.as_finding()), file=sys.stderr)
        return 2
    except ModelError as exc:
        print(render(exc.as_finding()), file=sys.stderr)
        return 2
    text = structure_dot(prep.diagram) if args.dot else structure_text(prep.diagram)
    emit(text, args.output, protected)
    return 0
