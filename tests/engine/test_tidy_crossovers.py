"""Far-off phase crossovers are counted, not listed (docs/results.md, `phase_crossovers_omitted`).

A delayed loop crosses the negative real axis again and again as the delay's phase keeps
turning; the JSON used to list up to 170 of them. The listed ones must be those within
TIDY_DB of the nearest one plus any that sets a gain margin; the others are counted.
"""
from __future__ import annotations

import json
from pathlib import Path

from loopwise.analysis import check_file
from loopwise.engine.metrics import TIDY_DB

SERVO = Path(__file__).resolve().parents[2] / "models" / "servo_axis.loop"


def test_delayed_loop_lists_the_near_crossovers_and_counts_the_rest():
    result = check_file(SERVO)
    current = next(b for b in result.breaks if b.name == "current")
    m = current.margins
    listed = [p.gain_margin_db for p in m.phase_crossovers]
    assert m.phase_crossovers_omitted > 100  # the 150 us converter delay: the curve spirals in
    assert 0 < len(listed) <= 10
    nearest = min(abs(g) for g in listed)
    for g in listed:
        sets_margin = any(x is not None and abs(g - x) < 1e-9 * max(1.0, abs(x))
                          for x in (m.gain_margin_up_db, m.gain_margin_down_db))
        assert abs(g) <= nearest + TIDY_DB + 1e-9 or sets_margin
    # both gain margins are read off listed crossovers
    for x in (m.gain_margin_up_db, m.gain_margin_down_db):
        if x is not None and abs(x) != float("inf"):
            assert any(abs(g - x) < 1e-9 * max(1.0, abs(x)) for g in listed)


def test_json_carries_the_count_of_omitted_crossovers():
    data = json.loads(json.dumps(check_file(SERVO).to_dict()))
    breaks = {b["name"]: b for b in data["breaks"]}
    assert breaks["current"]["phase_crossovers_omitted"] > 100
    assert len(breaks["current"]["phase_crossovers"]) <= 10


