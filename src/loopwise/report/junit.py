"""JUnit XML for CI test views: `testsuites` > one `testsuite` per model file >
one `testcase` for the whole model and one per break.

A testcase fails (`failure`) on an instability, a marginal closed loop, an
unmet requirement, or (with fail_on_warnings) a warning; a model that could
not be read is one testcase with an `error`. Built with ElementTree from the
per-model summary, every attribute and text through `xml_text`, so the output
is well-formed whatever the names and messages hold.
"""
from __future__ import annotations

import xml.etree.ElementTree as ET

from ..results import CAUTION
from .escape import xml_text
from .summary import LIBRARY_WORDS, BreakSummary, ModelSummary, finding_text, summarise

__all__ = ["render", "testcase", "library_case", "failure", "error_suite", "settings_suite", "finish"]


def testcase(suite, classname: str, name: str, file: str, line: int | None = None):
    """A `testcase` in `suite` for `name` of `classname` (the model), at `file` and, when
    given, `line`; every attribute made safe for XML."""
    attrs = {"classname": xml_text(classname), "name": xml_text(name), "file": xml_text(file)}
    if line:
        attrs["line"] = str(line)
    return ET.SubElement(suite, "testcase", attrs)


def library_case(suite, model: str, file: str) -> None:
    """A library of params and blocks: one skipped testcase, nothing to check on its own."""
    case = testcase(suite, model, "library", file)
    ET.SubElement(case, "skipped", {"message": LIBRARY_WORDS})
    _counts(suite, 1, 0, 1)


def failure(case, kind: str, message: str, details: list[str]) -> None:
    """Mark `case` failed: `kind` (instability, requirement, warning), a one-line `message`,
    and the detail lines as its text."""
    el = ET.SubElement(case, "failure", {"type": kind, "message": xml_text(message)})
    el.text = xml_text("\n".join(details))


def _break_problem(s: ModelSummary, b: BreakSummary, fail_on_warnings: bool) -> tuple[str, str, list[str]] | None:
    """(failure type, message, detail lines) of a break, or None when it passes."""
    unmet = [r for r in s.unmet if r.break_name == b.name]
    details = [f"{r.place}: {r.text}" for r in unmet]
    if b.status != "STABLE":
        res = b.result
        head = (f"{b.status}: P = {res.open_loop_rhp_poles}, N = {res.encirclements}, "
                f"Z = {res.closed_loop_rhp_poles}")
        return "instability", head, [head, *([b.stabilising] if b.stabilising else []), *details]
    if unmet:
        return "requirement", f"{len(unmet)} requirement(s) not met: " + "; ".join(
            r.text for r in unmet), details
    # the one rule: a waived warning does not fail (`Finding.counts`)
    warnings = [n for n in s.notes if n.break_name == b.name and n.finding.counts]
    if fail_on_warnings and warnings:
        texts = [n.line for n in warnings]
        return "warning", texts[0], texts
    return None


def _counts(suite, tests: int, failures: int, skipped: int = 0) -> None:
    for key, value in (("tests", tests), ("failures", failures), ("errors", 0), ("skipped", skipped)):
        suite.set(key, str(value))


def _model_suite(root, s: ModelSummary, fail_on_warnings: bool) -> None:
    suite = ET.SubElement(root, "testsuite", {"name": xml_text(s.file)})
    props = ET.SubElement(suite, "properties")
    ET.SubElement(props, "property", {"name": "model", "value": xml_text(s.model)})
    ET.SubElement(props, "property", {"name": "caution", "value": CAUTION})
    if s.is_library:
        library_case(suite, s.model, s.file)
        return
    failures = 0
    case = testcase(suite, s.model, "closed loop", s.file)
    model_warnings = [n for n in s.notes if n.break_name is None and n.finding.counts]  # a waived one does not fail
    if s.status != "STABLE":
        failure(case, "instability", f"{s.status}: {s.detail}",
              [f"break {name}: {words}" for name, words in s.stabilising])
        failures += 1
    elif fail_on_warnings and model_warnings:
        failure(case, "warning", model_warnings[0].finding.message, [n.text for n in model_warnings])
        failures += 1
    for b in s.breaks:
        case = testcase(suite, s.model, f"break {b.name} at {b.at}", s.file, b.line)
        problem = _break_problem(s, b, fail_on_warnings)
        if problem:
            failure(case, *problem)
            failures += 1
    notes = [n.logged for n in s.notes]  # each says its severity, as the text report does
    if notes:
        ET.SubElement(suite, "system-out").text = xml_text("\n".join(notes))
    _counts(suite, 1 + len(s.breaks), failures)


def error_suite(root, file: str, errors) -> None:
    """A suite for a file that could not be read: one testcase with an `error` per file,
    its text every located error with source line and caret."""
    suite = ET.SubElement(root, "testsuite", {"name": xml_text(file), "tests": "1",
                                              "failures": "0", "errors": "1", "skipped": "0"})
    case = testcase(suite, file, "read model", file, errors[0].span.line or None)
    el = ET.SubElement(case, "error", {"type": xml_text(errors[0].code),
                                       "message": xml_text(f"{errors[0].code} {errors[0].message}")})
    el.text = xml_text("\n".join(finding_text(e) for e in errors))


def settings_suite(root, findings, fail_on_warnings: bool) -> None:
    """Warnings about the run itself (a settings waiver that matched nothing): one case each."""
    suite = ET.SubElement(root, "testsuite", {"name": xml_text(findings[0].span.file)})
    failures = 0
    for f in findings:
        case = testcase(suite, "settings", f"{f.code} {f.message}", f.span.file, f.span.line or None)
        if fail_on_warnings and f.counts:
            failure(case, "warning", f"{f.code} {f.message}", [finding_text(f)])
            failures += 1
    ET.SubElement(suite, "system-out").text = xml_text("\n".join(finding_text(f) for f in findings))
    _counts(suite, len(findings), failures)


def finish(root, run, fail_on_warnings: bool = False) -> str:
    """The document once the models' suites are in `root`: a suite for the run's own
    findings (settings), one per file that could not be read, the totals, the XML text.
    Shared by every kind of result written as JUnit (check's, a sweep's)."""
    if run.findings:
        settings_suite(root, run.findings, fail_on_warnings)
    by_file: dict[str, list] = {}
    for e in run.errors:
        by_file.setdefault(e.span.file, []).append(e)
    for file, errors in by_file.items():
        error_suite(root, file, errors)
    suites = root.findall("testsuite")
    for key in ("tests", "failures", "errors", "skipped"):
        root.set(key, str(sum(int(s.get(key)) for s in suites)))
    ET.indent(root)
    return '<?xml version="1.0" encoding="UTF-8"?>\n' + ET.tostring(root, encoding="unicode") + "\n"


def render(run, fail_on_warnings: bool = False) -> str:
    """A check's results as JUnit XML: a suite per model file (a testcase for the closed
    loop and one per break), a suite for the run's own warnings, one per unreadable file."""
    root = ET.Element("testsuites", {"name": "loopwise check"})
    for m in run.models:
        _model_suite(root, summarise(m, fail_on_warnings), fail_on_warnings)
    return finish(root, run, fail_on_warnings)
