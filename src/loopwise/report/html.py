"""One self-contained HTML file: run summary, a table per model, requirements,
warnings, three views per break (inline SVG) and the caution.

Nothing is fetched and nothing runs: inline CSS, inline SVG, no scripts. The
output is also well-formed XML (void elements closed, text escaped), so a
strict parser can check it. Status is always a word (STABLE, UNSTABLE, PASS,
FAIL, MET, NOT MET); colour only repeats it, so the page reads in grey print.
"""
from __future__ import annotations

import re
from html import escape
from typing import Callable

from ..results import CAUTION
from .escape import html_text, xml_text
from .summary import BREAK_COLUMNS, ModelSummary, finding_text, summarise, tally

__all__ = ["render_html", "figure_count", "draw_svg", "inline_svg", "status_word", "CSS"]

VIEWS = ("nyquist", "bode", "sensitivity")
_CAPTIONS = {
    "nyquist": "Nyquist curve of L along the whole contour (far stretches on the shaded ring)",
    "bode": "Bode view of L with gain and phase margins",
    "sensitivity": "|S| and |T| with Ms, Mt and the disk-margin frequency",
}

CSS = """
:root { --ink: #1d2733; --muted: #5b6570; --line: #c9ced4; --band: #f3f5f7;
  --good: #1f6b3a; --bad: #a3271d; --warn: #7a5200; }
* { box-sizing: border-box; }
body { font: 15px/1.45 "DejaVu Sans", "Segoe UI", Helvetica, Arial, sans-serif;
  color: var(--ink); margin: 0 auto; max-width: 1240px; padding: 1.2rem 1.6rem 3rem; }
h1 { font-size: 1.6rem; margin: 0 0 .3rem; letter-spacing: .01em; }
h2 { font-size: 1.25rem; margin: 2.2rem 0 .4rem; padding-top: .6rem;
  border-top: 3px double var(--line); }
h3 { font-size: 1.05rem; margin: 1.4rem 0 .4rem; }
.lede { color: var(--muted); margin: 0 0 1rem; }
.caution { border-left: 5px solid var(--warn); background: #fbf6ea; padding: .6rem .9rem;
  margin: 1rem 0; }
.summary { display: flex; flex-wrap: wrap; gap: .6rem 1.6rem; margin: .8rem 0; padding: .7rem .9rem;
  background: var(--band); border: 1px solid var(--line); }
.summary div b { display: block; font-size: 1.3rem; }
table { border-collapse: collapse; margin: .5rem 0 1rem; font-size: .86rem; }
caption { text-align: left; color: var(--muted); padding-bottom: .2rem; }
th, td { border: 1px solid var(--line); padding: .25rem .5rem; vertical-align: top; }
th { background: var(--band); text-align: left; font-weight: 600; }
td.num { text-align: right; font-variant-numeric: tabular-nums; }
.wrap { overflow-x: auto; }
.word { font-weight: 700; letter-spacing: .04em; padding: 0 .3rem; border: 1px solid currentColor;
  border-radius: 3px; white-space: nowrap; }
.ok { color: var(--good); } .bad { color: var(--bad); } .warn { color: var(--warn); }
ul.plain { padding-left: 1.2rem; margin: .3rem 0; }
pre { background: var(--band); border: 1px solid var(--line); padding: .6rem .8rem;
  overflow-x: auto; font-size: .85rem; }
.plots { display: flex; flex-direction: column; gap: 1rem; }
figure { margin: 0; border: 1px solid var(--line); padding: .4rem; background: #fff;
  max-width: 940px; }
figure svg { display: block; width: 100%; height: auto; }
figcaption { color: var(--muted); font-size: .82rem; padding: .3rem .2rem 0; }
footer { margin-top: 2.5rem; color: var(--muted); font-size: .85rem; border-top: 1px solid var(--line); }
@media print {
  body { max-width: none; padding: 0; font-size: 10.5pt; }
  h2 { break-before: page; }
  figure, table, .caution { break-inside: avoid; }
  figure { margin: 0 0 .6rem; max-width: 100%; }
  .word { border-width: 1.5px; }
  a { color: inherit; text-decoration: none; }
}
"""

_WORD_CLASS = {"STABLE": "ok", "PASS": "ok", "MET": "ok", "UNSTABLE": "bad", "FAIL": "bad",
               "NOT MET": "bad", "ERROR": "bad", "MARGINAL": "warn", "WARNING": "warn"}


def status_word(word: str) -> str:
    """A status word (STABLE, FAIL, NOT MET, ...) as the page marks it: the word itself,
    with a colour that only repeats it."""
    return f'<span class="word {_WORD_CLASS.get(word, "")}">{escape(word)}</span>'


def _e(text) -> str:
    return html_text(text)


def figure_count(run) -> int:
    """How many figures the page draws: three views for each break with a recorded response."""
    return sum(len(VIEWS) for m in run.models for b in m.breaks if b.response is not None)


def _unique_ids(svg: str, prefix: str) -> str:
    """Prefix every id and its references, so many figures can share one page.

    A name given to several artists (e.g. every gain-crossover marker) is
    numbered after its first use; such names are never referenced."""
    ids = set(re.findall(r'\sid="([^"]+)"', svg))
    if not ids:
        return svg
    seen: dict[str, int] = {}

    def define(match):
        name = match.group(2)
        seen[name] = seen.get(name, 0) + 1
        extra = f"-{seen[name]}" if seen[name] > 1 else ""
        return f"{match.group(1)}{prefix}{name}{extra}"

    def refer(match):
        name = match.group(2)
        return f"{match.group(1)}{prefix}{name}" if name in ids else match.group(0)

    svg = re.sub(r'(\sid=")([^"]+)', define, svg)
    svg = re.sub(r'(href="#)([^"]+)', refer, svg)
    return re.sub(r'(url\(#)([^)]+)', refer, svg)


def draw_svg(job) -> str:
    """One figure as inline SVG: job = (BreakResult, kind, model name, hz, id prefix).
    A top-level function so a process pool can run it."""
    from .plots import make_figure

    result, kind, model, hz, prefix = job
    return inline_svg(make_figure(result, kind, model=model, hz=hz), prefix)


def inline_svg(fig, prefix: str) -> str:
    """A figure as inline SVG for this page: no metadata, ids unique to `prefix`."""
    from .plots import svg_text

    svg = svg_text(fig, salt=prefix)
    svg = re.sub(r"<metadata>.*?</metadata>\s*", "", svg, flags=re.S)  # no URLs, no dates
    return _unique_ids(svg, prefix)


def _samples(job) -> int:
    return len(job[0].response.s)


def _draw_all(run, hz: bool, jobs: int, tick: Callable[[], None]) -> dict:
    """Every figure of the run, keyed (model index, break index, kind); in `jobs`
    processes when more than one (`loopwise.pool`, the most densely sampled
    first). The pages are the same either way."""
    from ..pool import run_pool

    keys, work = [], []
    for n, m in enumerate(run.models):
        for k, b in enumerate(m.breaks):
            if b.response is not None:
                for kind in VIEWS:
                    keys.append((n, k, kind))
                    work.append((b, kind, xml_text(m.model), hz, f"m{n}b{k}{kind[0]}-"))  # a title in the SVG
    return dict(zip(keys, run_pool(draw_svg, work, jobs, cost=_samples, tick=tick)))


def _break_figures(b, index: str, svgs: dict, key) -> list[str]:
    if b.response is None:
        return [f"<p>No frequency response was recorded for break {_e(b.name)}.</p>"]
    out = ['<div class="plots">']
    for kind in VIEWS:
        out.append(f'<figure id="{index}-{kind}">{svgs[(*key, kind)]}'
                   f"<figcaption>{_e(_CAPTIONS[kind])}; break {_e(b.name)}.</figcaption></figure>")
    out.append("</div>")
    return out


def _table(s: ModelSummary) -> list[str]:
    head = "".join(f'<th scope="col">{_e(h)}</th>' for h, _, _ in BREAK_COLUMNS)
    rows = []
    for b in s.breaks:
        cells = []
        for (header, _, right), cell in zip(BREAK_COLUMNS, b.cells):
            body = status_word(cell) if header == "verdict" else _e(cell)
            cells.append(f'<td class="num">{body}</td>' if right else f"<td>{body}</td>")
        rows.append("<tr>" + "".join(cells) + "</tr>")
    return ['<div class="wrap"><table>',
            f"<caption>Breaks of model {_e(s.model)} ('-': margins not claimed for an "
            "unstable closed loop; inf: unbounded)</caption>",
            f"<thead><tr>{head}</tr></thead><tbody>", *rows, "</tbody></table></div>"]


def _requirements(s: ModelSummary) -> list[str]:
    items = [f"<li>{status_word('MET' if r.met else 'NOT MET')} break {_e(r.break_name)}: {_e(r.text)} "
             f"<small>{_e(r.place)}</small></li>" for r in s.requirements]
    if not items:
        return ["<p>No requirements apply to this model.</p>"]
    return [f"<p>Requirements: {s.met} of {s.total} met.</p>", '<ul class="plain">', *items, "</ul>"]


def _warnings(s: ModelSummary) -> list[str]:
    items = [f"<li>{status_word('WARNING' if n.waived is None else 'WAIVED')} {_e(n.line)}</li>"
             for n in s.notes if n.break_name is not None]
    items += [f"<li>break {_e(name)}: {_e(words)}</li>" for name, words in s.stabilising]
    out = ['<ul class="plain">', *items, "</ul>"] if items else []
    out += [f"<pre>{_e(n.text)}</pre>" for n in s.notes if n.break_name is None]
    return out


def _model_section(s: ModelSummary, n: int, svgs: dict, extra: list[str] = ()) -> list[str]:
    out = [f'<section id="model-{n}">',
           f"<h2>{status_word(s.verdict)} model {_e(s.model)} {status_word(s.status)}</h2>",
           f'<p class="lede">{_e(s.file)}: {s.result.closed_loop_rhp_poles} closed-loop pole(s) in '
           "the right half plane</p>"]
    if not s.breaks:
        out.append("<p>No breaks: add <code>break &lt;name&gt; at &lt;signal&gt;</code> to see "
                   "margins.</p>")
    else:
        out += _table(s)
    out += _requirements(s) + _warnings(s)
    for k, b in enumerate(s.breaks):
        out.append(f'<h3 id="model-{n}-break-{k}">break {_e(b.name)} at {_e(b.at)} '
                   f"{status_word(b.status)}</h3>")
        out += _break_figures(b.result, f"m{n}b{k}", svgs, (n, k))
    out += extra  # e.g. the sweep section (report/sweep_html.py)
    out.append("</section>")
    return out


def _settings(run) -> list[str]:
    if not run.findings:
        return []
    return ['<section id="settings">', f"<h2>{status_word('WARNING')} settings</h2>",
            *[f"<pre>{_e(finding_text(f))}</pre>" for f in run.findings], "</section>"]


def _errors(run) -> list[str]:
    if not run.errors:
        return []
    out = ['<section id="unreadable">', f"<h2>{status_word('ERROR')} models that could not be read</h2>"]
    out += [f"<pre>{_e(finding_text(e))}</pre>" for e in run.errors]
    return out + ["</section>"]


def _summary(run, fail: bool) -> list[str]:
    t = tally(run, fail)
    overall = "PASS" if t.passes else "FAIL"
    breaks = sum(len(m.breaks) for m in run.models)
    cells = [("result", status_word(overall)), ("models", t.models), ("passed", t.passed),
             ("failed", t.failed), ("could not be read", t.unreadable), ("breaks", breaks)]
    body = "".join(f"<div>{_e(k)}<b>{v if k == 'result' else _e(v)}</b></div>" for k, v in cells)
    return [f'<div class="summary">{body}</div>', f"<p>{_e(t.sentence())}.</p>"]


def render_html(run, *, hz: bool = False, fail_on_warnings: bool = False, jobs: int = 1,
                tick: Callable[[], None] = lambda: None, extra: dict | None = None) -> str:
    """The whole report as one string; figures drawn in `jobs` processes, and
    `tick` called once per figure drawn. `extra` maps a model's file to more of its
    section (HTML lines), such as its sweep."""
    svgs = _draw_all(run, hz, jobs, tick)
    version = f" {run.version}" if run.version else ""
    out = ['<!DOCTYPE html>', '<html lang="en">', "<head>",
           '<meta charset="utf-8" />',
           '<meta name="viewport" content="width=device-width, initial-scale=1" />',
           "<title>loopwise report</title>", f"<style>{CSS}</style>", "</head>", "<body>",
           "<header><h1>loopwise report</h1>",
           f'<p class="lede">Stability and margins at every loop break; loopwise{_e(version)}. '
           "Frequencies in " + ("Hz" if hz else "rad/s") + " in the plots, rad/s in the tables.</p>",
           f'<p class="caution"><strong>Caution.</strong> {_e(CAUTION)}</p>', "</header>", "<main>"]
    out += _summary(run, fail_on_warnings)
    summaries = [summarise(m, fail_on_warnings) for m in run.models]
    if summaries:
        out.append('<nav><ul class="plain">' + "".join(
            f'<li><a href="#model-{n}">{_e(s.model)}</a> ({_e(s.file)}) {status_word(s.status)}</li>'
            for n, s in enumerate(summaries)) + "</ul></nav>")
    for n, s in enumerate(summaries):
        out += _model_section(s, n, svgs, (extra or {}).get(s.file, []))
    out += _settings(run) + _errors(run)
    out += ["</main>", f"<footer><p>{_e(CAUTION)}</p></footer>", "</body>", "</html>"]
    return "\n".join(out) + "\n"
