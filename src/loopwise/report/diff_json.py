"""`loopwise diff` as JSON (schema: docs/diff.schema.json, described in docs/diff.md).

Key order is fixed so that the output itself diffs cleanly. Numbers that are
unbounded or absent are ``null``; the change is then also given in words.
"""
from __future__ import annotations

import dataclasses

from .. import __version__
from ..compare import BreakDiff, DiffResult, MarginChange, ModelDiff, RequirementChange, VerdictChange
from ..results import CAUTION, error_to_dict, json_number
from .escape import json_dumps

__all__ = ["DIFF_SCHEMA_VERSION", "to_dict", "render"]

DIFF_SCHEMA_VERSION = 1


def _verdict(v: VerdictChange | None) -> dict | None:
    if v is None:
        return None
    return {"stable_before": v.stable_before, "stable_after": v.stable_after,
            "closed_loop_rhp_poles_before": v.z_before, "closed_loop_rhp_poles_after": v.z_after,
            "marginal_before": v.marginal_before, "marginal_after": v.marginal_after,
            "direction": v.direction}


def _margin(c: MarginChange) -> dict:
    return {"metric": c.metric, "label": c.label, "unit": c.unit, "before": json_number(c.before),
            "after": json_number(c.after), "delta": json_number(c.delta), "direction": c.direction,
            "words": c.words, "regression": c.regression}


def _requirement(r: RequirementChange) -> dict:
    return {"metric": r.metric, "op": r.op, "unit": r.unit, "limit_before": json_number(r.limit_before),
            "limit_after": json_number(r.limit_after), "limit_text_before": r.limit_text_before,
            "limit_text_after": r.limit_text_after, "value_before": json_number(r.value_before),
            "value_after": json_number(r.value_after), "met_before": r.met_before,
            "met_after": r.met_after, "status": r.status, "regression": r.regression,
            "line": r.line}


def _break(d: BreakDiff) -> dict:
    return {"name": d.name, "status": d.status, "line": d.line,
            "at_before": d.at_before, "at_after": d.at_after,
            "stable_before": d.stable_before, "stable_after": d.stable_after,
            "verdict": _verdict(d.verdict), "margins": [_margin(c) for c in d.margins],
            "requirements": [_requirement(r) for r in d.requirements],
            "regressions": list(d.regressions)}


def _model(m: ModelDiff) -> dict:
    return {"file": m.file, "status": m.status, "model_before": m.model_before,
            "model_after": m.model_after, "stable_after": m.stable_after,
            "verdict": _verdict(m.verdict), "breaks": [_break(d) for d in m.breaks],
            "breaks_unchanged": m.breaks_unchanged,
            "errors_before": [error_to_dict(e) for e in m.errors_before],
            "errors_after": [error_to_dict(e) for e in m.errors_after],
            "regressions": list(m.regressions)}


def to_dict(result: DiffResult) -> dict:
    """A diff as its JSON contract (`"kind": "diff"`, docs/diff.md): the policy, the
    settings, a summary with the exit code, the regressions and every model's changes."""
    p = result.policy
    statuses = ("changed", "unchanged", "added", "removed", "errors appeared",
                "errors disappeared", "still unreadable")
    return {
        "schema": DIFF_SCHEMA_VERSION, "kind": "diff", "tool": "loopwise", "version": __version__,
        "caution": CAUTION,
        "old": result.old_label, "new": result.new_label,
        "policy": dataclasses.asdict(p),
        "settings": result.settings,
        "summary": {"models": len(result.models),
                    **{s.replace(" ", "_"): result.count(s) for s in statuses},
                    "regressions": len(result.regressions), "exit_code": result.exit_code},
        "regressions": list(result.regressions),
        "models": [_model(m) for m in result.models],
    }


def render(result: DiffResult) -> str:
    """A diff as indented JSON (`to_dict`), every control character escaped."""
    return json_dumps(to_dict(result))
