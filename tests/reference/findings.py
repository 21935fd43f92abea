"""Disagreements of the outside references themselves, collected while the reference tests
run and printed once in pytest's terminal summary (tests/conftest.py).

They are facts about the reference libraries (python-control's miscounts, its crossings in
rounding noise), never asserted away and never printed between the progress dots, where a
newcomer would read them as failures. Our own disagreements fail their tests instead.
"""
from __future__ import annotations

from collections import defaultdict

FINDINGS: dict[str, set[str]] = defaultdict(set)


def record(topic: str, line: str) -> None:
    """Note one finding under a topic such as "margins vs python-control"."""
    FINDINGS[topic].add(line)
