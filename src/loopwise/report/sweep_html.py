"""The HTML report's sweep section of one model: the verdict over the box, what was
sampled (and that it is evidence, not a proof), per break the worst margins and where,
the Nyquist band of sampled plants around the nominal curve, and each worst margin
against each ranged param. Lines of HTML for `html.render_html(extra=...)`.
"""
from __future__ import annotations

from .escape import html_text as _e
from .escape import xml_text
from .html import status_word as _word
from .sweep_summary import (EVIDENCE, WORST_HEADER, boundary_words, break_state, evidence_words, params_words,
                            requirement_words, unmet, unstable_where, verdict, verdict_words, worst_rows)

__all__ = ["sweep_section"]


def _worst_table(b) -> list[str]:
    rows = "".join(f"<tr><td>{_e(label)}</td><td class=\"num\">{_e(nom)}</td><td class=\"num\">{_e(worst)}</td>"
                   f"<td>{_e(where)}</td></tr>" for label, nom, worst, where in worst_rows(b))
    head = "".join(f'<th scope="col">{_e(h)}</th>' for h in WORST_HEADER)
    return ['<div class="wrap"><table>',
            f"<caption>Break {_e(b.name)}: the worst of each margin over the sampled plants, and where</caption>",
            f"<thead><tr>{head}</tr></thead>", f"<tbody>{rows}</tbody></table></div>"]


def _figures(nominal_break, brk: int, result, band: list, prefix: str) -> list[str]:
    from .html import inline_svg
    from .plots.sweep import band_figure, worst_figure

    out = ['<div class="plots">']
    if nominal_break.response is not None:
        plants = [m.breaks[brk] for m in band if brk < len(m.breaks)]
        svg = inline_svg(band_figure(nominal_break, plants, model=xml_text(result.model)), f"{prefix}band-")
        out.append(f"<figure>{svg}<figcaption>Nyquist curves of {len(plants)} sampled plants (thin) around the "
                   f"nominal plant (bold): the worst plant of each margin first, then corners; break "
                   f"{_e(nominal_break.name)}.</figcaption></figure>")
    if result.params:
        svg = inline_svg(worst_figure(result, brk, model=xml_text(result.model)), f"{prefix}worst-")
        out.append(f"<figure>{svg}<figcaption>Each worst margin against each ranged param: the worst value "
                   f"over the other params in each tenth of the param's range; break "
                   f"{_e(nominal_break.name)}.</figcaption></figure>")
    return out + ["</div>"]


def sweep_section(checked, result, band: list, index: int, fail_on_warnings: bool = False) -> list[str]:
    """`checked`: the model's ModelResult (nominal, with responses); `result`: its
    SweepModelResult; `band`: ModelResults of sampled plants (see sweep/band.py)."""
    word = verdict(result, fail_on_warnings)
    out = [f'<h3 id="model-{index}-sweep">{_word(word)} sweep over the box: {_e(verdict_words(result))}</h3>',
           f"<p>{_e(params_words(result))}.</p>",
           f"<p>Evidence: {_e(evidence_words(result))}. <strong>{_e(EVIDENCE)}.</strong></p>"]
    if unmet(result):
        out += ['<ul class="plain">'] + [f"<li>{_word('NOT MET')} {_e(requirement_words(result, b, r))}</li>"
                                         for b, r in unmet(result)] + ["</ul>"]
    for k, b in enumerate(result.breaks):
        state = _e(break_state(b)) if b.stable_everywhere else f"{_word('UNSTABLE')} {_e(unstable_where(b))}"
        out.append(f"<h4>break {_e(b.name)}: {state}</h4>")
        out += _worst_table(b)
        if b.boundaries:
            out += ["<p>Stability is lost between:</p>", '<ul class="plain">']
            out += [f"<li>{_e(boundary_words(x))}</li>" for x in b.boundaries] + ["</ul>"]
        nominal_break = next((nb for nb in checked.breaks if nb.name == b.name), None)
        if nominal_break is not None:
            out += _figures(nominal_break, k, result, band, f"m{index}s{k}")
    return out
