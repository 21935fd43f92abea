"""`loopwise sweep` as JUnit XML: one `testsuite` per model, one `testcase` per break.

A break's testcase fails when a sampled plant is unstable there, or when a
requirement is not met at the worst plant found (the message names the param
values); a plant that could not be analysed, or a model that could not be read,
is an `error`. Built with check's JUnit helpers (`report.junit`), every attribute
and text through `xml_text`, so the output is well-formed whatever the names hold.
"""
from __future__ import annotations

import xml.etree.ElementTree as ET

from ..results import CAUTION, is_library
from .escape import xml_text
from .junit import failure, finish, library_case, testcase
from .summary import finding_text, requirement_text
from .sweep_summary import (EVIDENCE, boundary_words, evidence_words, format_at, requirement_words, shown_findings,
                            unstable_words)

__all__ = ["render"]


def _break_case(suite, m, b, fail_on_warnings: bool) -> bool:
    case = testcase(suite, m.model, f"break {b.name} at {b.at} over the box", m.file, b.line)
    unmet = [r for r in b.requirements if not r.result.met]
    details = [requirement_words(m, b, r) for r in unmet]
    if not b.stable_everywhere:
        head = unstable_words(b)
        failure(case, "instability", head, [head, *(boundary_words(k) for k in b.boundaries), *details])
        return True
    if unmet:
        failure(case, "requirement", f"{len(unmet)} requirement(s) not met at the worst plant found: "
                + "; ".join(f"{requirement_text(r.result)} at {format_at(r.at)}" for r in unmet), details)
        return True
    if fail_on_warnings and b.warnings:
        texts = [f"{code} at {n} of {b.samples} plants" for code, n in b.warnings]
        failure(case, "warning", texts[0], texts)
        return True
    return False


def _model_suite(root, m, fail_on_warnings: bool) -> None:
    suite = ET.SubElement(root, "testsuite", {"name": xml_text(m.file)})
    props = ET.SubElement(suite, "properties")
    for name, value in (("model", m.model), ("evidence", f"{evidence_words(m)}; {EVIDENCE}"),
                        ("caution", CAUTION)):
        ET.SubElement(props, "property", {"name": name, "value": xml_text(value)})
    if is_library(m):  # nothing to sweep, as check says
        library_case(suite, m.model, m.file)
        return
    failures = sum(_break_case(suite, m, b, fail_on_warnings) for b in m.breaks)
    if shown_findings(m):
        ET.SubElement(suite, "system-out").text = xml_text("\n".join(finding_text(f) for f in shown_findings(m)))
    for key, value in (("tests", len(m.breaks)), ("failures", failures), ("errors", 0), ("skipped", 0)):
        suite.set(key, str(value))


def render(run, fail_on_warnings: bool = False) -> str:
    """A sweep's results as JUnit XML: a suite per model with a testcase per break over the
    box (a library's one skipped case), then check's suites for the run's own warnings
    and the unreadable files (`junit.finish`)."""
    root = ET.Element("testsuites", {"name": "loopwise sweep"})
    for m in run.models:
        _model_suite(root, m, fail_on_warnings)
    return finish(root, run, fail_on_warnings)
