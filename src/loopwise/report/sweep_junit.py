"""`loopwise sweep` as JUnit XML: one `testsuite` per model, one `testcase` per break.

A break's testcase fails when a sampled plant is unstable there, or when a
requirement is not met at the worst plant found (the message names the param
values); a plant that could not be analysed, or a model that could not be read,
is an `error`. Built like `check`'s JUnit form (the same helpers).
"""
from __future__ import annotations

import xml.etree.ElementTree as ET

from ..results import CAUTION
from .escape import xml_text as _clean
from .junit import _case, _error_suite, _fail
from .summary import finding_text, requirement_text
from .sweep_text import EVIDENCE, boundary_words, evidence_words, format_at, requirement_words

__all__ = ["render"]


def _break_case(suite, m, b, fail_on_warnings: bool) -> bool:
    case = _case(suite, m.model, f"break {b.name} at {b.at} over the box", m.file, b.line)
    unmet = [r for r in b.requirements if not r.result.met]
    details = [requirement_words(m, b, r) for r in unmet]
    if not b.stable_everywhere:
        head = f"UNSTABLE at {b.unstable_samples} of {b.samples} plants, first at {format_at(b.first_unstable_at)}"
        _fail(case, "instability", head, [head, *(boundary_words(k) for k in b.boundaries), *details])
        return True
    if unmet:
        _fail(case, "requirement", f"{len(unmet)} requirement(s) not met at the worst plant found: "
              + "; ".join(f"{requirement_text(r.result)} at {format_at(r.at)}" for r in unmet), details)
        return True
    if fail_on_warnings and b.warnings:
        texts = [f"{code} at {n} of {b.samples} plants" for code, n in b.warnings]
        _fail(case, "warning", texts[0], texts)
        return True
    return False


def _model_suite(root, m, fail_on_warnings: bool) -> None:
    suite = ET.SubElement(root, "testsuite", {"name": _clean(m.file)})
    props = ET.SubElement(suite, "properties")
    for name, value in (("model", m.model), ("evidence", f"{evidence_words(m)}; {EVIDENCE}"),
                        ("caution", CAUTION)):
        ET.SubElement(props, "property", {"name": name, "value": _clean(value)})
    failures = sum(_break_case(suite, m, b, fail_on_warnings) for b in m.breaks)
    if m.findings:
        ET.SubElement(suite, "system-out").text = _clean("\n".join(finding_text(f) for f in m.findings))
    for key, value in (("tests", len(m.breaks)), ("failures", failures), ("errors", 0), ("skipped", 0)):
        suite.set(key, str(value))


def render(run, fail_on_warnings: bool = False) -> str:
    root = ET.Element("testsuites", {"name": "loopwise sweep"})
    for m in run.models:
        _model_suite(root, m, fail_on_warnings)
    by_file: dict[str, list] = {}
    for e in run.errors:
        by_file.setdefault(e.span.file, []).append(e)
    for file, errors in by_file.items():
        _error_suite(root, file, errors)
    suites = root.findall("testsuite")
    for key in ("tests", "failures", "errors", "skipped"):
        root.set(key, str(sum(int(s.get(key)) for s in suites)))
    ET.indent(root)
    return '<?xml version="1.0" encoding="UTF-8"?>\n' + ET.tostring(root, encoding="unicode") + "\n"
