"""JUnit XML for CI test views: `testsuites` > one `testsuite` per model file >
one `testcase` for the whole model and one per break.

A testcase fails (`failure`) on an instability, a marginal closed loop, an
unmet requirement, or (with fail_on_warnings) a warning; a model that could
not be read is one testcase with an `error`. Built with ElementTree, so the
output is well-formed whatever the messages hold.
"""
from __future__ import annotations

import re
import xml.etree.ElementTree as ET

from ..results import CAUTION
from . import break_status, break_warning_text, finding_text, is_library, model_status, requirement_place

__all__ = ["render"]

# characters XML 1.0 cannot carry at all (control characters other than tab, LF, CR)
_NOT_XML = re.compile("[\x00-\x08\x0b\x0c\x0e-\x1f\ufffe\uffff]")


def _clean(text: str) -> str:
    return _NOT_XML.sub("\ufffd", text)


def _case(suite, classname: str, name: str, file: str, line: int | None = None):
    attrs = {"classname": _clean(classname), "name": _clean(name), "file": _clean(file)}
    if line:
        attrs["line"] = str(line)
    return ET.SubElement(suite, "testcase", attrs)


def _fail(case, kind: str, message: str, details: list[str]) -> None:
    el = ET.SubElement(case, "failure", {"type": kind, "message": _clean(message)})
    el.text = _clean("\n".join(details))


def _break_problems(m, b, fail_on_warnings: bool) -> tuple[str, str, list[str]] | None:
    """(failure type, message, detail lines) of a break, or None when it passes."""
    status = break_status(b)
    unmet = [r for r in b.requirements if not r.met]
    details = [f"{requirement_place(m, r)}: {r.describe()}" + (f" - {r.note}" if r.note else "")
               for r in unmet]
    if status != "STABLE":
        head = (f"{status}: P = {b.open_loop_rhp_poles}, N = {b.encirclements}, "
                f"Z = {b.closed_loop_rhp_poles}")
        return "instability", head, [head, *details]
    if unmet:
        return "requirement", f"{len(unmet)} requirement(s) not met: " + "; ".join(
            r.describe() for r in unmet), details
    if fail_on_warnings and b.open_warnings:
        texts = [f"{w.code} {w.message}" for w in b.open_warnings]
        return "warning", texts[0], texts
    return None


def _model_suite(root, m, fail_on_warnings: bool) -> None:
    suite = ET.SubElement(root, "testsuite", {"name": _clean(m.file)})
    props = ET.SubElement(suite, "properties")
    ET.SubElement(props, "property", {"name": "model", "value": _clean(m.model)})
    ET.SubElement(props, "property", {"name": "caution", "value": CAUTION})
    failures = 0
    if is_library(m):
        case = _case(suite, m.model, "library", m.file)
        ET.SubElement(case, "skipped", {"message": "a library of params and blocks for `use`: "
                                                   "nothing to check on its own"})
        for key, value in (("tests", "1"), ("failures", "0"), ("errors", "0"), ("skipped", "1")):
            suite.set(key, value)
        return
    case = _case(suite, m.model, "closed loop", m.file)
    status = model_status(m)
    model_warnings = [f for f in m.findings if f.counts]  # a waived warning does not fail
    if status != "STABLE":
        _fail(case, "instability", f"{status}: {m.closed_loop_rhp_poles} closed-loop pole(s) in "
                                   "the right half plane", [])
        failures += 1
    elif fail_on_warnings and model_warnings:
        _fail(case, "warning", model_warnings[0].message, [finding_text(f) for f in model_warnings])
        failures += 1
    for b in m.breaks:
        case = _case(suite, m.model, f"break {b.name} at {b.at}", m.file, b.line)
        problem = _break_problems(m, b, fail_on_warnings)
        if problem:
            _fail(case, *problem)
            failures += 1
    notes = [f"warning: {break_warning_text(b, w)}" for b in m.breaks for w in b.warnings]
    notes += [finding_text(f) for f in m.findings]
    if notes:
        ET.SubElement(suite, "system-out").text = _clean("\n".join(notes))
    suite.set("tests", str(1 + len(m.breaks)))
    suite.set("failures", str(failures))
    suite.set("errors", "0")
    suite.set("skipped", "0")


def _error_suite(root, file: str, errors) -> None:
    suite = ET.SubElement(root, "testsuite", {"name": _clean(file), "tests": "1",
                                              "failures": "0", "errors": "1", "skipped": "0"})
    case = _case(suite, file, "read model", file, errors[0].span.line or None)
    el = ET.SubElement(case, "error", {"type": errors[0].code,
                                       "message": _clean(f"{errors[0].code} {errors[0].message}")})
    el.text = _clean("\n".join(finding_text(e) for e in errors))


def _settings_suite(root, findings, fail_on_warnings: bool) -> None:
    """Warnings about the run itself (a settings waiver that matched nothing): one case each."""
    suite = ET.SubElement(root, "testsuite", {"name": _clean(findings[0].span.file)})
    failures = 0
    for f in findings:
        case = _case(suite, "settings", f"{f.code} {f.message}", f.span.file, f.span.line or None)
        if fail_on_warnings and f.counts:
            _fail(case, "warning", f"{f.code} {f.message}", [finding_text(f)])
            failures += 1
    ET.SubElement(suite, "system-out").text = _clean("\n".join(finding_text(f) for f in findings))
    for key, value in (("tests", len(findings)), ("failures", failures), ("errors", 0), ("skipped", 0)):
        suite.set(key, str(value))


def render(run, fail_on_warnings: bool = False) -> str:
    root = ET.Element("testsuites", {"name": "loopwise check"})
    for m in run.models:
        _model_suite(root, m, fail_on_warnings)
    if run.findings:
        _settings_suite(root, run.findings, fail_on_warnings)
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
