"""The reporter registry: which output formats exist for which kind of result.

A reporter is a module under `loopwise.report` with a function that takes one
result (a `RunResult` from `check`, a `DiffResult` from `diff`, or any other
kind a command registers, such as a sweep's) and returns text. Commands take
their `--format` choices from `formats(kind)` and write with `render`.

Only the standard library is imported here (the commands read the choices for
`--help`); a reporter's module loads when it is used. Shared helpers live in
`report.summary` (the per-model summary every format renders), `report.numbers`
(quantities and times) and `report.escape` (one sanitiser per format);
plots live in the `report/plots` package, loaded only by the commands that draw.
"""
from __future__ import annotations

import importlib
import inspect
from dataclasses import dataclass

__all__ = ["Reporter", "REPORTERS", "register", "formats", "reporter", "render"]


@dataclass(frozen=True)
class Reporter:
    """One `--format` of one kind of result."""

    kind: str          # the result it renders: "check", "diff", "sweep", ...
    name: str          # the --format name
    module: str        # module path, absolute or relative to loopwise.report
    function: str = "render"
    description: str = ""

    def load(self):
        """The reporter's function, its module imported now (not before it is used)."""
        module = self.module if "." in self.module else f"loopwise.report.{self.module}"
        return getattr(importlib.import_module(module), self.function)


#: (kind, format name) -> Reporter, in registration order (the order of --help)
REPORTERS: dict[tuple[str, str], Reporter] = {}


def register(kind: str, name: str, module: str, function: str = "render", description: str = "") -> Reporter:
    """Add (or replace) the reporter of format `name` for results of `kind`.

    `module` is a module of `loopwise.report` by its short name (`"text"`) or any
    module by its full name; its `function(result, **options)` returns text and
    may accept any of the keyword options `render` passes (`colour`,
    `fail_on_warnings`); options it does not take are not passed."""
    entry = Reporter(kind, name, module, function, description)
    REPORTERS[(kind, name)] = entry
    return entry


def formats(kind: str) -> tuple[str, ...]:
    """The --format choices for a kind of result, in registration order."""
    return tuple(name for (k, name) in REPORTERS if k == kind)


def reporter(kind: str, name: str) -> Reporter:
    """The registered reporter of format `name` for results of `kind`; a ValueError naming
    the formats there are when there is none."""
    try:
        return REPORTERS[(kind, name)]
    except KeyError:
        raise ValueError(f"no {name!r} format for {kind} results; formats: "
                         f"{', '.join(formats(kind)) or 'none'}") from None


def render(result, fmt: str, kind: str = "check", **options) -> str:
    """`result` in format `fmt`; options the reporter does not take are left out
    (only the text format knows colour)."""
    function = reporter(kind, fmt).load()
    accepted = inspect.signature(function).parameters
    return function(result, **{k: v for k, v in options.items() if k in accepted})


register("check", "text", "text", description="aligned plain text for a terminal or a CI log")
register("check", "json", "json_report", description="the results contract (docs/results.md)")
register("check", "junit", "junit", description="JUnit XML for CI test views")
register("check", "markdown", "markdown", description="a pull-request comment")
register("check", "sarif", "sarif", "render_check", description="SARIF 2.1.0 for code-review annotations")
register("diff", "text", "diff_text")
register("diff", "markdown", "diff_markdown")
register("diff", "json", "diff_json")
register("diff", "sarif", "sarif", "render_diff")
register("sweep", "text", "sweep_text", description="the worst margins over the box and where, for a terminal")
register("sweep", "json", "json_report", description="the sweep contract (docs/results.md, docs/sweep.schema.json)")
register("sweep", "junit", "sweep_junit", description="JUnit XML: one testcase per break over the box")
register("sweep", "markdown", "sweep_markdown", description="a pull-request comment")
register("sweep", "sarif", "sarif", "render_sweep", description="SARIF 2.1.0 at the break and require lines")
